package kernel

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"strconv"
)

// The sieve's trie re-derived one class at a time (SPEC.md, sections 1,
// 2 "Trie codes", 3 step 7 and 7).

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

func (p *Params) power(s int) string {
	if x := p.pow(s); x.BitLen() > 64 {
		return fmt.Sprintf("%d^%d (%d bits)", p.A, s, x.BitLen())
	} else {
		return fmt.Sprintf("%d^%d = %v", p.A, s, x)
	}
}

// Stub is a class open at depth D (Res mod 2^D, S odd steps, V =
// T^D(Res) mod 2^64): chunk i >= 1 starts at stub i-1.
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

// table counts the classes open at depth j and those closing at each step
// over (depth, odd steps) pairs, on which closing alone depends (section
// 7): the counts of a sieve by the map alone.
func (p *Params) table() *Tally {
	t := &Tally{Closed: make([]uint64, p.J+1)}
	cur := []uint64{1}
	for d := 0; d < p.J; d++ {
		next := make([]uint64, len(cur)+1)
		for s, n := range cur {
			if p.Closes(d+1, s) {
				t.Closed[d+1] += n // the even child closes
			} else {
				next[s] += n
			}
			next[s+1] += n
		}
		cur = next
	}
	for _, n := range cur {
		t.Survivors += n
	}
	return t
}

// Tally is what the verified claims of chunks add up to.
type Tally struct {
	Survivors uint64
	Closed    []uint64 // Closed[t], t = 1..J
	Stubs     []Stub   // the top chunk: the classes open at depth D
	Joined    []uint64 // the joined survivors' residues, if kept
	joins     uint64
}

func (t *Tally) add(u *Tally) {
	t.Survivors, t.joins = t.Survivors+u.Survivors, t.joins+u.joins
	for i, c := range u.Closed {
		t.Closed[i] += c
	}
}

// Subtree is a memo entry: the code of the trie below a class at depth t
// with s odd steps and value u mod 2^(J-t), which alone fix it. Only
// Params.Subtree makes one, once it has walked it.
type Subtree struct {
	t, s     int
	u, n     uint64   // n: the code's length in bits
	words    []uint64 // the code, left-aligned
	tally    Tally
	verified bool
}

// A Memo is a table of subtrees at one depth (package check's): the walk
// takes an entry only if the kernel verified it for that very class.
type Memo interface {
	Depth() int
	Lookup(s int, v uint64) *Subtree
}

// Subtree verifies a memo entry: it walks the class (t, s, u) down to
// depth J against the code in words (n bits), and returns the entry, or
// nil if that code is not the true one.
func (p *Params) Subtree(t, s int, u uint64, words []uint64, n uint64) *Subtree {
	code := make([]byte, 8*len(words))
	for i, x := range words {
		binary.BigEndian.PutUint64(code[8*i:], x)
	}
	w := &walk{p: p, code: code, nbit: n, end: p.J, judge: true, tally: Tally{Closed: make([]uint64, p.J+1)}}
	if t < p.D || t > p.J || n > 8*uint64(len(code)) || !w.visit(t, s, u, 0) || w.claim != nil || w.pos != n {
		return nil
	}
	return &Subtree{t, s, u & (1<<(p.J-t) - 1), n, words, w.tally, true}
}

// walk reads the codes of one chunk, and, while judge holds and no claim
// has failed, compares each with what the map says about its class.
// After a false claim it goes on decoding, so that a record that breaks
// the grammar is found malformed before any claim of it is judged
// (SPEC.md, section 3).
type walk struct {
	p         *Params
	chunk     int
	at        int64 // the record's offset
	code      []byte
	nbit, pos uint64
	end       int // the depth of the chunk's leaves
	judge     bool
	memo      Memo
	tally     Tally
	maxStubs  int      // the top chunk: the stubs the header's record count allows
	found     []uint64 // the survivors, for a join section
	claim     *Failure // the first false claim
	bad       *Failure // the codes break the grammar
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

func (w *walk) where(res uint64, t int, claim, expected, found string) Where {
	return Where{Chunk: chunkAt(w.chunk), Residue: strconv.FormatUint(res, 10), Step: t, Claim: claim, Expected: expected, Found: found}
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
			if shut && w.judging() {
				w.claim = invalid(ReasonMissedClosing, w.where(res|even<<t, t+1, fmt.Sprintf("open after step %d", t+1), "closed", "open"),
					"the class closes at step %d (%s < 2^%d) but is claimed open", t+1, p.power(s), t+1)
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
		if (y != even || !shut) && w.judging() {
			w.claim = w.falseClosing(res|y<<t, t+1, s, y != even)
		}
		w.tally.Closed[t+1]++
		v, s = p.Step(v+(1-y)*p.apow[s], s)
		res |= (1 - y) << t
	}
	switch {
	case w.end == p.J && w.found != nil && len(w.found) == maxJoinSurvivors:
		w.bad = malformed(w.at, "chunk %d has more than %d survivors, the most a chunk of a sieve with joins may hold", w.chunk, maxJoinSurvivors)
		return false
	case w.end == p.J:
		w.tally.Survivors++
		if w.found != nil {
			w.found = append(w.found, res)
		}
	case len(w.tally.Stubs) == w.maxStubs:
		// Bounded by the record count the file declares, never by what the
		// codes claim: a short top chunk may describe millions of classes.
		if w.judging() {
			w.claim = invalid(ReasonCount, w.where(res, t, "chunks", strconv.Itoa(w.maxStubs+1), "more"),
				"the top of the trie has more than the %d classes open at depth %d that the header's %d chunks allow", w.maxStubs, t, w.maxStubs+1)
		}
	default:
		w.tally.Stubs = append(w.tally.Stubs, Stub{res, s, v})
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
	w.tally.add(&e.tally)
	return true
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
