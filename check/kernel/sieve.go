package kernel

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"strconv"
)

// The sieve's trie, re-derived one class at a time (SPEC.md, sections 1,
// 2 "Trie codes", 3 step 7, and 8).

const (
	chunkHead        = 14
	maxJoinSurvivors = 1 << 22 // survivors of one chunk of a sieve with joins
)

// Params is the arithmetic of one map and step budget j. The walk follows
// T^t(r) modulo 2^64, which fixes the parities of the next 64-t steps
// (SPEC.md, "Why the walk may work modulo 2^64"): the wrap-around is
// modular arithmetic by design. Whether a class closes is decided by the
// exact bit length of a^s.
type Params struct {
	Map
	J, D int      // the step budget and the split depth
	apow []uint64 // a^s mod 2^64
	alen []int    // the bit length of a^s
	keep bool     // keep the residues of joined survivors (Tally.Joined)
}

func NewParams(m Map, j int) *Params {
	p := &Params{Map: m, J: j, D: splitDepth(j)}
	x := big.NewInt(1)
	for s := 0; s <= j+1; s++ {
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

// Pow is a^s mod 2^64: the two children of a class at depth t differ by
// a^s in their value (SPEC.md, section 1).
func (p *Params) Pow(s int) uint64 { return p.apow[s] }

func (p *Params) power(s int) string {
	x := new(big.Int).Exp(big.NewInt(int64(p.A)), big.NewInt(int64(s)), nil)
	if x.BitLen() > 64 {
		return fmt.Sprintf("%d^%d (%d bits)", p.A, s, x.BitLen())
	}
	return fmt.Sprintf("%d^%d = %v", p.A, s, x)
}

// Stub is a class open at depth D: Res mod 2^D with S odd steps and
// V = T^D(Res) mod 2^64. Chunk i >= 1 starts at stub i-1.
type Stub struct {
	Res uint64
	S   int
	V   uint64
}

// Stubs walks the top of the trie by the map alone and returns the classes
// open at depth D in the order of the codes, at most max of them, so that
// the list never outgrows what the file's record count allows.
func (p *Params) Stubs(max int) []Stub {
	var out []Stub
	var walk func(t, s int, v, res uint64)
	walk = func(t, s int, v, res uint64) {
		if len(out) >= max {
			return
		}
		if t == p.D {
			out = append(out, Stub{res, s, v})
			return
		}
		for c := uint64(0); c < 2; c++ {
			if vc := v + c*p.apow[s]; vc&1 == 1 || !p.Closes(t+1, s) {
				nv, ns := p.Step(vc, s)
				walk(t+1, ns, nv, res|c<<t)
			}
		}
	}
	walk(0, 0, 0, 0)
	return out
}

// table counts the classes open at depth j and those closing at each step
// over (depth, odd steps) pairs, on which closing alone depends (SPEC.md,
// section 7): the counts of a sieve by the map alone.
func (p *Params) table() (open uint64, closed []uint64) {
	closed = make([]uint64, p.J+1)
	cur := []uint64{1}
	for t := 0; t < p.J; t++ {
		next := make([]uint64, len(cur)+1)
		for s, n := range cur {
			if p.Closes(t+1, s) {
				closed[t+1] += n // the even child closes
			} else {
				next[s] += n
			}
			next[s+1] += n
		}
		cur = next
	}
	for _, n := range cur {
		open += n
	}
	return open, closed
}

// Tally is what the verified claims of one chunk add up to.
type Tally struct {
	Survivors uint64
	Closed    []uint64 // Closed[t], t = 1..J
	Stubs     []Stub   // the top chunk: the classes open at depth D
	Joined    []uint64 // a sieve with joins: the joined survivors' residues, if kept
	joins     uint64   // the joins verified
}

// Subtree is the code of the trie below a class at depth t with s odd
// steps and value u mod 2^(J-t), which alone fix it: a fast path's memo
// entry, made only by Params.Subtree once the kernel has walked it.
type Subtree struct {
	t, s      int
	u         uint64
	words     []uint64 // the code, left-aligned
	n         uint64   // its length in bits
	survivors uint64
	closed    []uint64
	ok        bool
}

// A Memo is a table of subtrees at one depth (check's memo): the walk
// takes an entry only if the kernel validated it for that very class.
type Memo interface {
	Depth() int
	Lookup(s int, v uint64) *Subtree
}

// Subtree validates a memo entry: it walks the class (t, s, u) down to
// depth J against the code in words (n bits) and returns the entry, or
// nil if the code is not the true one.
func (p *Params) Subtree(t, s int, u uint64, words []uint64, n uint64) *Subtree {
	code := make([]byte, 8*len(words))
	for i, x := range words {
		binary.BigEndian.PutUint64(code[8*i:], x)
	}
	w := &walk{p: p, code: code, nbit: n, end: p.J, tally: Tally{Closed: make([]uint64, p.J+1)}}
	if t < p.D || t > p.J || n > uint64(len(code))*8 || !w.visit(t, s, u, 0) || w.pos != n {
		return nil
	}
	mask := uint64(1)<<(p.J-t) - 1
	return &Subtree{t, s, u & mask, words, n, w.tally.Survivors, w.tally.Closed, true}
}

// walk re-derives the claims of one chunk: it reads each code and compares
// it with what the map says about that class.
type walk struct {
	p         *Params
	chunk     int
	at        int64 // the record's offset
	code      []byte
	nbit, pos uint64
	end       int
	tally     Tally
	maxStubs  int  // the top chunk: the stubs the header's record count allows
	collect   bool // keep the survivors' residues, for their joins
	found     []uint64
	memo      Memo
	fail      *Failure
}

func (w *walk) bit() (uint64, bool) {
	if w.pos >= w.nbit {
		return 0, false
	}
	w.pos++
	return uint64(w.code[(w.pos-1)/8]>>(7-(w.pos-1)%8)) & 1, true
}

func (w *walk) where(res uint64, t int, claim, expected, found string) Where {
	return Where{Chunk: chunkAt(w.chunk), Residue: strconv.FormatUint(res, 10), Step: t, Claim: claim, Expected: expected, Found: found}
}

// visit checks the codes below the open class res mod 2^t, which has s
// odd steps and value v = T^t(res) mod 2^64.
func (w *walk) visit(t, s int, v, res uint64) bool {
	p := w.p
	for ; t < w.end; t++ {
		if w.memo != nil && t == w.memo.Depth() && w.matches(w.memo.Lookup(s, v), t, s, v) {
			return true
		}
		x, ok := w.bit()
		if !ok {
			w.fail = malformed(w.at, "chunk %d: the trie codes end at the open class %d mod 2^%d, above depth %d", w.chunk, res, t, w.end)
			return false
		}
		even := v & 1            // the child whose step t+1 is even
		shut := p.Closes(t+1, s) // that child closes at t+1
		if x == 0 {
			if shut {
				w.fail = invalid(ReasonMissedClosing, w.where(res|even<<t, t+1, fmt.Sprintf("open after step %d", t+1), "closed", "open"),
					"the class closes at step %d (%s < 2^%d) but is claimed open", t+1, p.power(s), t+1)
				return false
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
			w.fail = malformed(w.at, "chunk %d: the trie codes end inside the code of class %d mod 2^%d", w.chunk, res, t)
			return false
		}
		if y != even || !shut {
			w.fail = w.falseClosing(res|y<<t, t+1, s, y != even)
			return false
		}
		w.tally.Closed[t+1]++
		v, s = p.Step(v+(1-even)*p.apow[s], s)
		res |= (1 - even) << t
	}
	switch {
	case w.end == p.J && w.collect && len(w.found) == maxJoinSurvivors:
		w.fail = malformed(w.at, "chunk %d has more than %d survivors, the most a chunk of a sieve with joins may hold", w.chunk, maxJoinSurvivors)
		return false
	case w.end == p.J:
		w.tally.Survivors++
		if w.collect {
			w.found = append(w.found, res)
		}
	case len(w.tally.Stubs) == w.maxStubs:
		// Bounded by the record count the file declares, never by what the
		// codes claim: a short top chunk may describe millions of classes.
		w.fail = invalid(ReasonCount, w.where(res, t, "chunks", strconv.Itoa(w.maxStubs+1), "more"),
			"the top of the trie has more than the %d classes open at depth %d that the header's %d chunks allow", w.maxStubs, t, w.maxStubs+1)
		return false
	default:
		w.tally.Stubs = append(w.tally.Stubs, Stub{res, s, v})
	}
	return true
}

// matches takes a validated memo entry for this class if the chunk's code
// at the walk's position is the entry's, and moves past it.
func (w *walk) matches(e *Subtree, t, s int, v uint64) bool {
	if e == nil || !e.ok || e.t != t || e.s != s || e.u != v&(uint64(1)<<(w.p.J-t)-1) || w.pos+e.n > w.nbit {
		return false
	}
	for i := uint64(0); 64*i < e.n; i++ {
		got, want := window(w.code, w.pos+64*i), e.words[i]
		if rest := e.n - 64*i; rest < 64 {
			got, want = got>>(64-rest), want>>(64-rest)
		}
		if got != want {
			return false
		}
	}
	w.pos += e.n
	w.tally.Survivors += e.survivors
	for i, c := range e.closed {
		w.tally.Closed[i] += c
	}
	return true
}

// window returns the 64 code bits from bit pos, zero beyond the end.
func window(code []byte, pos uint64) uint64 {
	var b [9]byte
	copy(b[:], code[min(pos/8, uint64(len(code))):])
	return binary.BigEndian.Uint64(b[:])<<(pos%8) | uint64(b[8])>>(8-pos%8)
}

// falseClosing explains why class c mod 2^t, claimed to close at step t,
// does not: its step t is odd, or it has s odd steps and a^s >= 2^t.
func (w *walk) falseClosing(c uint64, t, s int, oddStep bool) *Failure {
	p, claim := w.p, fmt.Sprintf("closes at step %d", t)
	switch {
	case oddStep:
		return invalid(ReasonFalseClosing, w.where(c, t, claim, "open", "closed"),
			"step %d of this class is odd under %s, so it has %d odd steps and %s > 2^%d; it does not close there", t, p.Map, s+1, p.power(s+1), t)
	case t == p.J:
		return invalid(ReasonFalseClosing, w.where(c, t, claim, "survivor", "closed"),
			"the class survives all %d steps: it has %d odd steps and %s >= 2^%d", t, s, p.power(s), t)
	}
	return invalid(ReasonFalseClosing, w.where(c, t, claim, "open", "closed"),
		"after %d steps the class has %d odd steps and %s >= 2^%d; it has not closed yet", t, s, p.power(s), t)
}
