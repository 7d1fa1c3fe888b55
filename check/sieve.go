package check

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"strconv"
)

// sieve holds the checker's own arithmetic for one map and budget.
//
// Parities are followed modulo 2^64: the next j-t parities of a value
// depend only on its residue mod 2^(j-t), and a step loses one low bit, so
// 64 bits decide every parity up to j = 64 (SPEC.md, "Why the walk may work
// modulo 2^64"). The wrap-around is modular arithmetic by design. Whether a
// class closes is decided by exact bit lengths of a^s, and exceptions and
// fates use math/big.
type sieve struct {
	h       *sieveHeader
	a, b    uint64
	j, d    int
	apow    []uint64 // a^s mod 2^64
	alen    []int    // bit length of a^s, exact
	A, B    *big.Int
	name    string
	useMemo bool
	work    *meter // a range block's derivation: the steps its counts allow
	// keepJoins keeps each chunk's join flags (walk.flags), for a range
	// that rests on this sieve.
	keepJoins bool
}

func newSieve(h *sieveHeader) *sieve {
	sv := &sieve{h: h, a: uint64(h.a), b: uint64(int64(h.b)), j: h.j, d: splitDepth(h.j),
		A: big.NewInt(int64(h.a)), B: big.NewInt(int64(h.b)), name: mapName(h.a, h.b)}
	p := big.NewInt(1)
	for s := 0; s <= h.j+1; s++ {
		sv.apow = append(sv.apow, p.Uint64())
		sv.alen = append(sv.alen, p.BitLen())
		p.Mul(p, sv.A)
	}
	return sv
}

// closesAt: after t steps with s odd ones, a class closes iff a^s < 2^t.
func (sv *sieve) closesAt(t, s int) bool { return sv.alen[s] <= t }

// step takes a value one step on, modulo 2^64.
func (sv *sieve) step(v uint64, s int) (uint64, int) {
	if v&1 == 0 {
		return v >> 1, s
	}
	return (sv.a*v + sv.b) >> 1, s + 1
}

func (sv *sieve) power(s int) string {
	p := new(big.Int).Exp(sv.A, big.NewInt(int64(s)), nil)
	if p.BitLen() > 64 {
		return fmt.Sprintf("%d^%d (%d bits)", sv.h.a, s, p.BitLen())
	}
	return fmt.Sprintf("%d^%d = %v", sv.h.a, s, p)
}

type stubState struct {
	res uint64
	s   int
	v   uint64
}

// walk re-derives the claims of one chunk: it reads each code and compares
// it with what the map says about that class.
type walk struct {
	sv        *sieve
	chunk     int
	at        int64 // the record's file offset
	code      []byte
	nbit, pos uint64
	start     uint64 // the residue the chunk starts at
	begin     int    // the depth it starts at
	end       int    // the depth of its leaves
	survivors uint64
	closed    []uint64 // closed[t]
	stubs     []stubState
	memo      *memo    // nil: walk every class
	maxStubs  int      // the top chunk: the stubs the preamble allows
	collect   bool     // keep the survivors' residues (for their joins)
	found     []uint64 // the survivors, in the order of the codes
	rest      []byte   // the record's bytes after the codes: a join section
	joined    uint64
	flags     []uint64 // with keepJoins: bit x says survivor x is joined
	fail      *Failure
}

func (w *walk) bit() (uint64, bool) {
	if w.pos >= w.nbit {
		return 0, false
	}
	b := uint64(w.code[w.pos/8]>>(7-w.pos%8)) & 1
	w.pos++
	return b, true
}

func (w *walk) where(res uint64, t int, claim, expected, found string) Where {
	c := w.chunk
	return Where{Chunk: &c, Residue: strconv.FormatUint(res, 10), Step: t, Claim: claim, Expected: expected, Found: found}
}

// visit checks the codes below the open class res mod 2^t, which has s odd
// steps and value v = T^t(res) mod 2^64.
func (w *walk) visit(t, s int, v, res uint64) bool {
	sv := w.sv
	for t < w.end {
		if w.memo != nil && t == w.memo.depth {
			if c := w.memo.codes[s]; c != nil && w.matches(&c[v&w.memo.mask]) {
				return true
			}
		}
		x, ok := w.bit()
		if !ok {
			w.fail = malformed(w.at, "chunk %d: the trie codes end at the open class %d mod 2^%d, above depth %d", w.chunk, res, t, w.end)
			return false
		}
		even := v & 1               // the child whose step t+1 is even
		shut := sv.closesAt(t+1, s) // that child closes at t+1
		if x == 0 {
			if shut {
				c := res | even<<t
				w.fail = invalid(ReasonMissedClosing, w.where(c, t+1, fmt.Sprintf("open after step %d", t+1), "closed", "open"),
					"the class closes at step %d (%s < 2^%d) but is claimed open", t+1, sv.power(s), t+1)
				return false
			}
			v0, s0 := sv.step(v, s)
			if !w.visit(t+1, s0, v0, res) {
				return false
			}
			v, s = sv.step(v+sv.apow[s], s)
			res |= 1 << t
			t++
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
		w.closed[t+1]++
		odd := 1 - even
		v, s = sv.step(v+odd*sv.apow[s], s)
		res |= odd << t
		t++
	}
	if w.end == sv.j {
		w.survivors++
		if w.collect {
			// The joins are checked survivor by survivor after the walk,
			// so the list is capped (SPEC.md, section 8, "Limits").
			if len(w.found) == maxJoinSurvivors {
				w.fail = malformed(w.at, "chunk %d has more than %d survivors, the most a chunk of a sieve with joins may hold", w.chunk, maxJoinSurvivors)
				return false
			}
			w.found = append(w.found, res)
		}
		return true
	}
	// The list of stubs is bounded by the record count the file declares,
	// never by what the codes claim: a short top chunk may describe
	// millions of open classes.
	if len(w.stubs) == w.maxStubs {
		w.fail = invalid(ReasonCount, w.where(res, t, "chunks", strconv.Itoa(w.maxStubs+1), "more"),
			"the top of the trie has more than the %d classes open at depth %d that the header's %d chunks allow", w.maxStubs, t, w.maxStubs+1)
		return false
	}
	w.stubs = append(w.stubs, stubState{res: res, s: s, v: v})
	return true
}

// falseClosing explains why class c mod 2^t, claimed to close at step t,
// does not: its step t is odd, or it has s odd steps and a^s >= 2^t.
func (w *walk) falseClosing(c uint64, t, s int, oddStep bool) *Failure {
	sv := w.sv
	claim := fmt.Sprintf("closes at step %d", t)
	switch {
	case oddStep:
		return invalid(ReasonFalseClosing, w.where(c, t, claim, "open", "closed"),
			"step %d of this class is odd under %s, so it has %d odd steps and %s > 2^%d; it does not close there",
			t, sv.name, s+1, sv.power(s+1), t)
	case t == sv.j:
		return invalid(ReasonFalseClosing, w.where(c, t, claim, "survivor", "closed"),
			"the class survives all %d steps: it has %d odd steps and %s >= 2^%d", t, s, sv.power(s), t)
	}
	return invalid(ReasonFalseClosing, w.where(c, t, claim, "open", "closed"),
		"after %d steps the class has %d odd steps and %s >= 2^%d; it has not closed yet", t, s, sv.power(s), t)
}

// frame parses the head of chunk record i (at file offset base) and sets
// up a walk over its codes: the top chunk from depth 0 to D, the others
// from D to j.
func (sv *sieve) frame(i int, rec []byte, base int64) (*walk, *Failure) {
	if len(rec) < chunkHead {
		return nil, malformed(base, "chunk %d: a record of %d bytes is shorter than the %d-byte chunk head", i, len(rec), chunkHead)
	}
	w := &walk{sv: sv, chunk: i, at: base, start: binary.BigEndian.Uint64(rec), nbit: uint64(binary.BigEndian.Uint32(rec[10:])),
		code: rec[chunkHead:], begin: int(rec[8]), end: int(rec[9])}
	if w.begin > w.end || w.end > maxK {
		return nil, malformed(base+8, "chunk %d spans depths %d to %d", i, w.begin, w.end)
	}
	if n := (w.nbit + 7) / 8; uint64(len(w.code)) < n || (!sv.h.joins && uint64(len(w.code)) != n) {
		return nil, malformed(base+10, "chunk %d: %d code bits need %d bytes, the record has %d", i, w.nbit, (w.nbit+7)/8, len(w.code))
	} else {
		w.code, w.rest = w.code[:n], w.code[n:]
	}
	if w.nbit%8 != 0 && w.code[len(w.code)-1]<<(w.nbit%8) != 0 {
		return nil, malformed(base+int64(len(rec))-1, "chunk %d: padding bits are not zero", i)
	}
	if w.begin < 64 && w.start>>w.begin != 0 {
		return nil, malformed(base, "chunk %d starts at residue %d, which does not fit below 2^%d", i, w.start, w.begin)
	}
	return w, nil
}

// depths says whether chunk i spans the depths the header calls for: 0..D
// for the top chunk, D..j for the others.
func (sv *sieve) depths(w *walk) *Failure {
	from, to := sv.d, sv.j
	if w.chunk == 0 {
		from, to = 0, sv.d
	}
	if w.begin != from || w.end != to {
		c := w.chunk
		return invalid(ReasonChunkSpan, Where{Chunk: &c, Claim: "depths of the chunk", Expected: fmt.Sprintf("%d..%d", from, to), Found: fmt.Sprintf("%d..%d", w.begin, w.end)},
			"the chunk spans depths %d..%d, but j = %d (split at D = %d) calls for %d..%d", w.begin, w.end, sv.j, sv.d, from, to)
	}
	return nil
}

// checkChunk verifies chunk record i; want is the stub it must start at
// (nil for the top chunk). The record is decoded before it is judged
// (SPEC.md, section 3): a false claim found by the walk is reported only
// if the record's codes and join section follow the grammar, else the
// record is malformed.
func (sv *sieve) checkChunk(i int, rec []byte, want *stubState, base int64, m *memo, maxStubs int) (*walk, *Failure) {
	w, fl := sv.judgeChunk(i, rec, want, base, m, maxStubs)
	if fl != nil && fl.Class == ErrInvalid {
		if g := sv.grammar(i, rec, base); g != nil {
			return nil, g
		}
	}
	return w, fl
}

// grammar decodes chunk record i without judging it: its head, its codes,
// which must describe a trie from its own depth "from" to "to" and be
// used exactly, and its join section.
func (sv *sieve) grammar(i int, rec []byte, base int64) *Failure {
	w, fl := sv.frame(i, rec, base)
	if fl != nil {
		return fl
	}
	if i == 0 && len(w.rest) > 0 {
		return malformed(base+int64(len(rec)-len(w.rest)), "the top chunk has %d bytes after its codes; only chunks with survivors have joins", len(w.rest))
	}
	var leaves uint64
	var parse func(t int) bool
	parse = func(t int) bool {
		for t < w.end {
			x, ok := w.bit()
			if !ok {
				return false
			}
			if x == 0 {
				if !parse(t + 1) {
					return false
				}
			} else if _, ok := w.bit(); !ok {
				return false
			}
			t++
		}
		leaves++
		return true
	}
	if !parse(w.begin) {
		return malformed(base, "chunk %d: the trie codes end above depth %d", i, w.end)
	}
	if w.pos != w.nbit {
		return malformed(base+chunkHead, "chunk %d: %d code bits are left after the last class of depth %d", i, w.nbit-w.pos, w.end)
	}
	if i > 0 && sv.h.joins {
		if leaves > maxJoinSurvivors {
			return malformed(base, "chunk %d has more than %d survivors, the most a chunk of a sieve with joins may hold", i, maxJoinSurvivors)
		}
		if _, _, fl := readJoins(w.rest, int(leaves), i, base+int64(len(rec)-len(w.rest))); fl != nil {
			return fl
		}
	}
	return nil
}

func (sv *sieve) judgeChunk(i int, rec []byte, want *stubState, base int64, m *memo, maxStubs int) (*walk, *Failure) {
	w, fl := sv.frame(i, rec, base)
	if fl != nil {
		return nil, fl
	}
	w.maxStubs = maxStubs
	if fl := sv.depths(w); fl != nil {
		return nil, fl
	}
	w.closed = make([]uint64, sv.j+1)
	start := stubState{}
	if i == 0 && len(w.rest) > 0 {
		return nil, malformed(base+int64(len(rec)-len(w.rest)), "the top chunk has %d bytes after its codes; only chunks with survivors have joins", len(w.rest))
	}
	if i > 0 {
		w.memo = m
		if sv.h.joins { // the joins name survivors by their place: walk each one
			w.memo, w.collect = nil, true
			w.found = make([]uint64, 0, min(w.nbit+1, 1<<20)) // a trie has at most one leaf per code bit, plus one
		}
		if w.start != want.res {
			return nil, invalid(ReasonChunkStart, w.where(w.start, sv.d, "chunk covers this class", strconv.FormatUint(want.res, 10), strconv.FormatUint(w.start, 10)),
				"chunk %d must cover class %d mod 2^%d, open class number %d at depth %d", i, want.res, sv.d, i, sv.d)
		}
		start = *want
	}
	if !w.visit(w.begin, start.s, start.v, start.res) {
		return nil, w.fail
	}
	if w.pos != w.nbit {
		return nil, malformed(base+chunkHead, "chunk %d: %d code bits are left after the last class of depth %d", i, w.nbit-w.pos, w.end)
	}
	if w.collect {
		if fl := sv.checkJoins(w, base+int64(len(rec)-len(w.rest))); fl != nil {
			return nil, fl
		}
	}
	return w, nil
}
