package emit

import "descent/cert"

// A node of the trie is the class r mod 2^t with s odd steps among its first
// t, and v = T^t(r) mod 2^64. Its children are r and r + 2^t, with values v
// and v + a^s at depth t: T^t(2^t*q + r) = a^s*q + T^t(r). Since a^s is
// odd, exactly one child takes an even step t+1 (the one with bit v&1) and
// only that one can close there.

// tally counts what a walk emitted.
type tally struct {
	open   uint64   // classes open at the walk's last depth
	closed []uint64 // closed[t]: classes closing at step t
	joined uint64   // survivors joined to a smaller residue
}

func newTally(j int) tally { return tally{closed: make([]uint64, j+1)} }

func (t *tally) add(o tally) {
	t.open += o.open
	t.joined += o.joined
	for i, c := range o.closed {
		t.closed[i] += c
	}
}

// bottom is the trie code of the last levels of a subtree: below depth tb
// the codes depend only on s and on v mod 2^L, so they are computed once per
// pair and copied.
type bottom struct {
	words  []uint64
	nbits  uint
	open   uint64
	closed []uint64 // closings at tb+1..j
}

const bottomLevels = 8

type encoder struct {
	r     *rules
	end   int // depth of the leaves: D for the top chunk, j otherwise
	tb    int // depth at which the table takes over; -1 for none
	mask  uint64
	table [][]bottom // [s][v mod 2^L]
	w     cert.BitWriter
	tally tally
	stub  func(res uint64, s int, v uint64) error // top chunk: leaves at depth D
}

// buildBottom computes the table for subtrees rooted at depth tb = j - L.
func buildBottom(r *rules, levels int) [][]bottom {
	tb := r.j - levels
	table := make([][]bottom, tb+1)
	for s := 0; s <= tb; s++ {
		if r.bitl[s] <= tb { // a class with so few odd steps closed above tb
			continue
		}
		table[s] = make([]bottom, 1<<levels)
		for u := range table[s] {
			e := encoder{r: r, end: r.j, tb: -1, tally: newTally(r.j)}
			e.node(tb, s, uint64(u))
			table[s][u] = bottom{words: e.w.Words(), nbits: uint(e.w.Len()), open: e.tally.open,
				closed: append([]uint64(nil), e.tally.closed[tb+1:]...)}
		}
	}
	return table
}

// node writes the codes of the subtree below the open node (t, s, v).
func (e *encoder) node(t, s int, v uint64) {
	r := e.r
	for {
		if t == e.end {
			e.tally.open++
			return
		}
		if t == e.tb {
			b := &e.table[s][v&e.mask]
			e.w.AppendString(b.words, b.nbits)
			e.tally.open += b.open
			for i, c := range b.closed {
				e.tally.closed[e.tb+1+i] += c
			}
			return
		}
		even := v & 1
		if r.closes(t+1, s) {
			// Code 1 y: child y (the even one) closes; go on into the other.
			e.w.WriteBits(2|even, 2)
			e.tally.closed[t+1]++
			v = (r.a*(v+r.pow[s]*(1-even)) + r.b) >> 1
			s++
			t++
			continue
		}
		// Code 0: both children open.
		e.w.WriteBits(0, 1)
		e.child(t, s, v)
		v += r.pow[s]
		if v&1 == 0 {
			v >>= 1
		} else {
			v = (r.a*v + r.b) >> 1
			s++
		}
		t++
	}
}

func (e *encoder) child(t, s int, v uint64) {
	if v&1 == 0 {
		e.node(t+1, s, v>>1)
	} else {
		e.node(t+1, s+1, (e.r.a*v+e.r.b)>>1)
	}
}

// top writes the codes of depths 0..D and hands every class open at D to
// e.stub, in depth-first order. It stops at the first error from e.stub.
func (e *encoder) top(t, s int, v, res uint64) error {
	r := e.r
	for {
		if t == e.end {
			e.tally.open++
			if e.stub != nil {
				return e.stub(res, s, v)
			}
			return nil
		}
		even := v & 1
		if r.closes(t+1, s) {
			e.w.WriteBits(2|even, 2)
			e.tally.closed[t+1]++
			odd := 1 - even
			v = (r.a*(v+r.pow[s]*odd) + r.b) >> 1
			res |= odd << t
			s++
			t++
			continue
		}
		e.w.WriteBits(0, 1)
		for c := uint64(0); c < 2; c++ {
			vc := v + r.pow[s]*c
			var err error
			if vc&1 == 0 {
				err = e.top(t+1, s, vc>>1, res|c<<t)
			} else {
				err = e.top(t+1, s+1, (r.a*vc+r.b)>>1, res|c<<t)
			}
			if err != nil {
				return err
			}
		}
		return nil
	}
}
