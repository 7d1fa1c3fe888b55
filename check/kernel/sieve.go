package kernel

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"math/bits"
	"strconv"
)

// The sieve's trie re-derived one class at a time, and the chunk records
// that carry it (SPEC.md, sections 1, 2 "Chunks", "Trie codes", 3, 7, 8).

// The bytes of a chunk's head; the survivors of a chunk with joins.
const chunkHead, maxJoinSurvivors = 14, 1 << 22

// Params is the arithmetic of one map and step budget j. The walk follows
// T^t(r) mod 2^64, which fixes the parities of the next 64-t steps
// (SPEC.md, "Why the walk may work modulo 2^64"); whether a class closes
// is decided by the exact bit length of a^s.
type Params struct {
	Map
	J, D int      // the step budget and the split depth
	apow []uint64 // a^s mod 2^64
	alen []int    // the bit length of a^s
	keep bool     // keep the residues of joined survivors (Tally.Joined)
}

func NewParams(m Map, j int) *Params {
	p := &Params{Map: m, J: j, D: splitDepth(j)}
	for x, s := big.NewInt(1), 0; s <= j+1; s++ {
		p.apow, p.alen = append(p.apow, x.Uint64()), append(p.alen, x.BitLen())
		x.Mul(x, big.NewInt(int64(m.A)))
	}
	return p
}

// Closes says whether a class with s odd steps after t steps closes: a^s < 2^t.
func (p *Params) Closes(t, s int) bool { return p.alen[s] <= t }

// Step takes v = T^t(r) mod 2^64 one step on, counting odd steps in s.
func (p *Params) Step(v uint64, s int) (uint64, int) {
	if v&1 == 0 {
		return v >> 1, s
	}
	return (uint64(p.A)*v + uint64(int64(p.B))) >> 1, s + 1
}

// Pow is a^s mod 2^64: the values of the two children of a class with s
// odd steps differ by a^s (SPEC.md, section 1).
func (p *Params) Pow(s int) uint64 { return p.apow[s] }

func (p *Params) pow(s int) *big.Int {
	return new(big.Int).Exp(big.NewInt(int64(p.A)), big.NewInt(int64(s)), nil)
}

// Stub is a class open at depth D (Res mod 2^D, S odd steps, V =
// T^D(Res) mod 2^64): chunk i >= 1 starts at stub i-1.
type Stub struct {
	Res uint64
	S   int
	V   uint64
}

// Stubs walks the top of the trie by the map alone and returns the classes
// open at depth D in the order of the codes, at most max of them (the
// file's record count bounds the list, not the map).
func (p *Params) Stubs(max int) []Stub {
	var out []Stub
	var walk func(t, s int, v, res uint64)
	walk = func(t, s int, v, res uint64) {
		if len(out) < max && t == p.D {
			out = append(out, Stub{res, s, v})
		}
		for c := uint64(0); c < 2 && len(out) < max && t < p.D; c++ {
			if vc := v + c*p.apow[s]; vc&1 == 1 || !p.Closes(t+1, s) {
				nv, ns := p.Step(vc, s)
				walk(t+1, ns, nv, res|c<<t)
			}
		}
	}
	walk(0, 0, 0, 0)
	return out
}

// counts counts the survivors mod 2^j and the classes closing at each step
// over (depth, odd steps) pairs, on which closing alone depends (section
// 7): once every chunk is judged true and one per stub, the chunks' counts.
func (p *Params) counts() (survivors uint64, closed []uint64) {
	cur, closed := []uint64{1}, make([]uint64, p.J+1)
	for d := 0; d < p.J; d++ {
		next := make([]uint64, len(cur)+1)
		for s, n := range cur {
			if p.Closes(d+1, s) {
				closed[d+1] += n // the even child closes
			} else {
				next[s] += n
			}
			next[s+1] += n
		}
		cur = next
	}
	for _, n := range cur {
		survivors += n
	}
	return survivors, closed
}

// Tally is what a judged chunk adds up to: its joins.
type Tally struct {
	Joined []uint64 // the joined survivors' residues, if kept
	joins  uint64
}

// Subtree is a memo entry: the code (n bits in words, left-aligned) of the
// trie below a class at depth t with s odd steps and value u mod 2^(J-t),
// which alone fix it. Only Params.Subtree makes one, once it walked it.
type Subtree struct {
	t, s     int
	u, n     uint64
	words    []uint64
	verified bool
}

// A Memo is a table of subtrees at one depth (package check's): the walk
// takes an entry only if the kernel verified it for that very class.
type Memo interface {
	Depth() int
	Lookup(s int, v uint64) *Subtree
}

// Subtree walks the class (t, s, u) down to depth J against the code and
// returns it as a memo entry, or nil if it is not the true one.
func (p *Params) Subtree(t, s int, u uint64, words []uint64, n uint64) *Subtree {
	code := make([]byte, 8*len(words))
	for i, x := range words {
		binary.BigEndian.PutUint64(code[8*i:], x)
	}
	w := &walk{p: p, code: code, nbit: n, end: p.J, judge: true}
	if t < p.D || t > p.J || n > 8*uint64(len(code)) || !w.visit(t, s, u, 0) || w.claim != nil || w.pos != n {
		return nil
	}
	return &Subtree{t, s, u & (1<<(p.J-t) - 1), n, words, true}
}

// walk reads the codes of one chunk, and, while judge holds and no claim
// has failed, compares each with what the map says about its class. After
// a false claim it goes on decoding, so that a record that breaks the
// grammar is malformed before any claim of it is judged (section 3).
type walk struct {
	p          *Params
	chunk, end int   // end: the depth of the chunk's leaves
	at         int64 // the record's offset
	code       []byte
	nbit, pos  uint64
	judge, top bool
	room       int // the top chunk: the open classes the file's record count allows
	memo       Memo
	found      []uint64 // the survivors, for a join section
	claim, bad *Failure // the first false claim; the codes break the grammar
}

func (w *walk) bit() (uint64, bool) {
	if w.pos >= w.nbit {
		return 0, false
	}
	w.pos++
	return uint64(w.code[(w.pos-1)/8]>>(7-(w.pos-1)%8)) & 1, true
}

// judging says whether claims are still judged: not once one is false.
func (w *walk) judging() bool { return w.judge && w.claim == nil }

func (w *walk) fail(reason string, res uint64, t int, claim, format string, args ...any) {
	if w.judging() {
		w.claim = invalid(reason, Where{Chunk: at(w.chunk), Residue: strconv.FormatUint(res, 10), Step: t, Claim: claim}, format, args...)
	}
}

// visit reads the codes below the open class res mod 2^t, which has s odd
// steps and value v = T^t(res) mod 2^64; false if they break the grammar.
func (w *walk) visit(t, s int, v, res uint64) bool {
	p := w.p
	for ; t < w.end; t++ {
		if w.memo != nil && w.judging() && t == w.memo.Depth() && w.matches(w.memo.Lookup(s, v), t, s, v) {
			return true
		}
		x, ok := w.bit()
		if !ok {
			w.bad = malformed(w.at, "chunk %d: the trie codes end at the open class %d mod 2^%d, above depth %d", w.chunk, res, t, w.end)
			return false
		}
		even, shut := v&1, p.Closes(t+1, s) // the child whose step t+1 is even closes at t+1
		if x == 0 {
			if shut {
				w.fail(ReasonMissedClosing, res|even<<t, t+1, "open", "the class closes at step %d (%d^%d < 2^%d) but is claimed open", t+1, p.A, s, t+1)
			}
			if v0, s0 := p.Step(v, s); !w.visit(t+1, s0, v0, res) {
				return false
			}
			v, s = p.Step(v+p.apow[s], s)
			res |= 1 << t
			continue
		}
		y, ok := w.bit()
		if !ok {
			w.bad = malformed(w.at, "chunk %d: the trie codes end inside the code of class %d mod 2^%d", w.chunk, res, t)
			return false
		}
		if y != even {
			w.fail(ReasonFalseClosing, res|y<<t, t+1, "closed", "step %d of this class is odd under %s, so it has %d odd steps and %d^%d > 2^%d; it does not close there", t+1, p.Map, s+1, p.A, s+1, t+1)
		} else if !shut {
			w.fail(ReasonFalseClosing, res|y<<t, t+1, "closed", "after %d steps the class has %d odd steps and %d^%d >= 2^%d; it has not closed", t+1, s, p.A, s, t+1)
		}
		v, s = p.Step(v+(1-y)*p.apow[s], s)
		res |= (1 - y) << t
	}
	if w.found != nil && len(w.found) == maxJoinSurvivors {
		w.bad = malformed(w.at, "chunk %d has more than %d survivors, the most a chunk of a sieve with joins may hold", w.chunk, maxJoinSurvivors)
		return false
	} else if w.found != nil {
		w.found = append(w.found, res)
	} else if w.top && w.room == 0 {
		w.fail(ReasonCount, res, t, "chunks", "the top of the trie has more classes open at depth %d than the header's chunks below the top", t)
	} else if w.top {
		w.room--
	}
	return true
}

// matches takes a verified memo entry for this class if the chunk's code
// at the walk's position is the entry's, and moves past it.
func (w *walk) matches(e *Subtree, t, s int, v uint64) bool {
	if e == nil || !e.verified || e.t != t || e.s != s || e.u != v&(1<<(w.p.J-t)-1) || w.pos+e.n > w.nbit {
		return false
	}
	for i := uint64(0); 64*i < e.n; i++ {
		var b [9]byte // the 64 code bits from w.pos + 64i, zero beyond the end
		at := (w.pos + 64*i) / 8
		copy(b[:], w.code[min(at, uint64(len(w.code))):])
		got, want, sh := binary.BigEndian.Uint64(b[:])<<(w.pos%8)|uint64(b[8])>>(8-w.pos%8), e.words[i], 64-min(64, e.n-64*i)
		if got>>sh != want>>sh {
			return false
		}
	}
	w.pos += e.n
	return true
}

// chunk decodes record g (the whole's index) at offset base and, if judge,
// judges it: its depths, its start (want, its stub), every class by its
// code, and its joins. A record that breaks the grammar is malformed,
// whatever it claims; else its first false claim fails (section 3, step 7).
func (p *Params) chunk(g int, rec []byte, base int64, want *Stub, room int, joins, judge bool, memo Memo) (*Tally, *Failure) {
	if len(rec) < chunkHead {
		return nil, malformed(base, "chunk %d: a record of %d bytes is shorter than the %d-byte chunk head", g, len(rec), chunkHead)
	}
	w := &walk{p: p, chunk: g, at: base, nbit: uint64(binary.BigEndian.Uint32(rec[10:])), code: rec[chunkHead:], end: int(rec[9]), judge: judge, top: g == 0, room: room}
	begin, start, n := int(rec[8]), binary.BigEndian.Uint64(rec), (w.nbit+7)/8
	if begin > w.end || w.end > maxK {
		return nil, malformed(base+8, "chunk %d spans depths %d to %d", g, begin, w.end)
	} else if uint64(len(w.code)) < n || (!joins && uint64(len(w.code)) != n) {
		return nil, malformed(base+10, "chunk %d: %d code bits need %d bytes, the record has %d", g, w.nbit, n, len(w.code))
	}
	rest := w.code[n:]
	w.code = w.code[:n]
	if w.nbit%8 != 0 && w.code[n-1]<<(w.nbit%8) != 0 {
		return nil, malformed(base+int64(len(rec))-1, "chunk %d: padding bits are not zero", g)
	} else if begin < 64 && start>>begin != 0 {
		return nil, malformed(base, "chunk %d starts at residue %d, which does not fit below 2^%d", g, start, begin)
	} else if g == 0 && len(rest) > 0 {
		return nil, malformed(base+int64(len(rec)-len(rest)), "the top chunk has %d bytes after its codes; only chunks with survivors have joins", len(rest))
	}
	from, to, top := p.D, p.J, Stub{}
	if g == 0 {
		from, to = 0, p.D
	}
	if begin != from || w.end != to {
		w.fail(ReasonChunkSpan, start, begin, "depths", "the chunk spans depths %d..%d, but j = %d (split at D = %d) calls for %d..%d", begin, w.end, p.J, p.D, from, to)
	}
	if g > 0 && want != nil {
		if start != want.Res {
			w.fail(ReasonChunkStart, start, p.D, "start", "chunk %d must cover class %d mod 2^%d, open class number %d at depth %d", g, want.Res, p.D, g, p.D)
		}
		top = *want
	}
	if g > 0 && joins { // the joins name survivors by their place: walk each one
		w.found = make([]uint64, 0, min(w.nbit+1, 1<<20)) // a trie has at most one leaf per code bit, plus one
	} else if g > 0 {
		w.memo = memo
	}
	if !w.visit(begin, top.S, top.V, top.Res) {
		return nil, w.bad
	} else if w.pos != w.nbit {
		return nil, malformed(base+chunkHead, "chunk %d: %d code bits are left after the last class of depth %d", g, w.nbit-w.pos, w.end)
	}
	t := &Tally{}
	if w.found != nil {
		joined, deltas, fl := readJoins(rest, len(w.found), g, base+int64(len(rec)-len(rest)))
		if fl != nil {
			return nil, fl
		}
		for x, r := range w.found {
			if joined[x] && w.judging() {
				w.claim = p.join(w, r, deltas[x])
				if t.joins++; p.keep {
					t.Joined = append(t.Joined, r)
				}
			}
		}
	}
	if w.claim != nil || !judge {
		return nil, w.claim
	}
	return t, nil
}

// readJoins reads the join section of a chunk with n survivors: a code
// per survivor (0: not joined; 10: joined to r - 1; 11: to r - delta,
// delta = 2 + the next varint), zero bits to a whole byte, then one
// unsigned shortest-form varint of at most 2^64 - 3 per code 11, using
// every byte. at is the section's offset.
func readJoins(rest []byte, n, chunk int, at int64) (joined []bool, deltas []uint64, fl *Failure) {
	if need := (n + 7) / 8; len(rest) < need {
		return nil, nil, malformed(at, "chunk %d: the join codes of %d survivors need at least %d bytes, the section has %d", chunk, n, need, len(rest))
	}
	w := &walk{code: rest, nbit: 8 * uint64(len(rest))}
	joined, deltas = make([]bool, n), make([]uint64, n)
	var explicit []int
	for x := range n {
		c, ok := w.bit()
		if y := uint64(0); ok && c == 1 {
			if y, ok = w.bit(); y == 1 {
				explicit = append(explicit, x)
			}
			joined[x], deltas[x] = true, 1
		}
		if !ok {
			return nil, nil, malformed(at, "chunk %d: the join codes of %d survivors need more than the section's %d bytes", chunk, n, len(rest))
		}
	}
	nb := (w.pos + 7) / 8
	if w.pos%8 != 0 && rest[nb-1]<<(w.pos%8) != 0 {
		return nil, nil, malformed(at+int64(nb)-1, "chunk %d: padding bits after the join codes are not zero", chunk)
	}
	rest, at = rest[nb:], at+int64(nb)
	for _, x := range explicit {
		// Shortest form: a last byte of zero would make a longer form of a
		// smaller varint. delta = 2 + v stays within 64 bits.
		v, m := binary.Uvarint(rest)
		if m <= 0 || m > 1 && rest[m-1] == 0 || v > 1<<64-3 {
			return nil, nil, malformed(at, "chunk %d: the delta of joined survivor %d is not a shortest-form varint of at most 2^64 - 3", chunk, x)
		}
		deltas[x] = v + 2
		rest, at = rest[m:], at+int64(m)
	}
	if len(rest) > 0 {
		return nil, nil, malformed(at, "chunk %d: %d bytes follow the last join", chunk, len(rest))
	}
	return joined, deltas, nil
}

// join checks that survivor r mod 2^k joins r - delta (SPEC.md, section 8):
// after k steps both have the same odd steps and the same value.
func (p *Params) join(w *walk, r, delta uint64) *Failure {
	where := func() Where { // made only for a failure: joins are many
		return Where{Chunk: at(w.chunk), Residue: strconv.FormatUint(r, 10), Step: p.J, Claim: fmt.Sprintf("joins r - %d", delta)}
	}
	if delta > r {
		return invalid(ReasonJoin, where(), "the partner of a join must be a residue 0 <= r' < r; r - %d is below zero", delta)
	}
	s1, v1, b1 := p.afterK(r)
	s2, v2, b2 := p.afterK(r - delta)
	if s1 != s2 {
		return invalid(ReasonJoin, where(), "after %d steps class %d has %d odd steps and %d mod 2^%d has %d: their paths can meet for some q at most, not for all", p.J, r, s1, r-delta, p.J, s2)
	} else if b1 == nil && b2 == nil && v1 == v2 {
		return nil // the common case, without math/big
	} else if x1, x2 := or(b1, v1), or(b2, v2); x1.Cmp(x2) != 0 {
		return invalid(ReasonJoin, where(), "T^%d(%d) = %v but T^%d(%d) = %v: the paths do not meet", p.J, r, x1, p.J, r-delta, x2)
	}
	return nil
}

// or is a result of afterK as one number.
func or(b *big.Int, v uint64) *big.Int {
	if b != nil {
		return b
	}
	return new(big.Int).SetUint64(v)
}

// afterK follows x for k steps exactly and returns the odd steps and
// T^k(x): in v while the steps fit in 64 bits (b nil), else in b.
func (p *Params) afterK(x uint64) (s int, v uint64, b *big.Int) {
	for t := 0; t < p.J; t++ {
		if x&1 == 0 {
			x >>= 1
			continue
		}
		hi, lo := bits.Mul64(x, uint64(p.A))
		lo, c := bits.Add64(lo, uint64(int64(p.B)), 0)
		if p.B < 0 {
			c-- // adding b in two's complement carries one more than b adds
		}
		if hi+c != 0 {
			z := new(big.Int).SetUint64(x)
			for ; t < p.J; t++ {
				if p.apply(z) {
					s++
				}
			}
			return s, 0, z
		}
		x, s = lo>>1, s+1
	}
	return s, x, nil
}
