package kernel

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"math/bits"
	"strconv"
)

// The chunk records of a sieve: framing, decoding and judging, and the
// join sections (SPEC.md, section 2 "Chunks", section 3 step 7, section 8).

const (
	chunkHead        = 14      // the bytes of a chunk's head
	maxJoinSurvivors = 1 << 22 // survivors of a chunk of a sieve with joins
)

// frame reads the head of chunk record i at offset base and sets up a walk
// over its codes; rest is what follows them (a join section).
func (p *Params) frame(i int, rec []byte, base int64, joins bool) (w *walk, begin int, start uint64, rest []byte, fl *Failure) {
	if len(rec) < chunkHead {
		return nil, 0, 0, nil, malformed(base, "chunk %d: a record of %d bytes is shorter than the %d-byte chunk head", i, len(rec), chunkHead)
	}
	w = &walk{p: p, chunk: i, at: base, nbit: uint64(binary.BigEndian.Uint32(rec[10:])), code: rec[chunkHead:], end: int(rec[9])}
	begin, start = int(rec[8]), binary.BigEndian.Uint64(rec)
	n := (w.nbit + 7) / 8
	switch {
	case begin > w.end || w.end > maxK:
		return nil, 0, 0, nil, malformed(base+8, "chunk %d spans depths %d to %d", i, begin, w.end)
	case uint64(len(w.code)) < n || (!joins && uint64(len(w.code)) != n):
		return nil, 0, 0, nil, malformed(base+10, "chunk %d: %d code bits need %d bytes, the record has %d", i, w.nbit, n, len(w.code))
	}
	w.code, rest = w.code[:n], w.code[n:]
	if w.nbit%8 != 0 && w.code[n-1]<<(w.nbit%8) != 0 {
		return nil, 0, 0, nil, malformed(base+int64(len(rec))-1, "chunk %d: padding bits are not zero", i)
	}
	if begin < 64 && start>>begin != 0 {
		return nil, 0, 0, nil, malformed(base, "chunk %d starts at residue %d, which does not fit below 2^%d", i, start, begin)
	}
	if i == 0 && len(rest) > 0 {
		return nil, 0, 0, nil, malformed(base+int64(len(rec)-len(rest)), "the top chunk has %d bytes after its codes; only chunks with survivors have joins", len(rest))
	}
	return w, begin, start, rest, nil
}

// chunk decodes record i and, if judge, judges it: its depths, its start
// (want, the stub it must start at; nil for the top chunk), every class
// by its code, and its joins. A record that breaks the grammar is
// malformed, whatever it claims; else its first false claim is the
// failure (SPEC.md, section 3, step 7).
func (p *Params) chunk(i int, rec []byte, base int64, want *Stub, maxStubs int, joins, judge bool, memo Memo) (*Tally, *Failure) {
	w, begin, start, rest, fl := p.frame(i, rec, base, joins)
	if fl != nil {
		return nil, fl
	}
	w.judge, w.maxStubs, w.tally.Closed = judge, maxStubs, make([]uint64, p.J+1)
	from, to := p.D, p.J
	if i == 0 {
		from, to = 0, p.D
	}
	if (begin != from || w.end != to) && judge {
		w.claim = invalid(ReasonChunkSpan, Where{Chunk: chunkAt(i), Claim: "depths of the chunk", Expected: fmt.Sprintf("%d..%d", from, to), Found: fmt.Sprintf("%d..%d", begin, w.end)},
			"the chunk spans depths %d..%d, but j = %d (split at D = %d) calls for %d..%d", begin, w.end, p.J, p.D, from, to)
	}
	at := Stub{}
	if i > 0 && want != nil {
		if start != want.Res && w.judging() {
			w.claim = invalid(ReasonChunkStart, w.where(start, p.D, "chunk covers this class", strconv.FormatUint(want.Res, 10), strconv.FormatUint(start, 10)),
				"chunk %d must cover class %d mod 2^%d, open class number %d at depth %d", i, want.Res, p.D, i, p.D)
		}
		at = *want
	}
	if i > 0 && joins { // the joins name survivors by their place: walk each one
		w.found = make([]uint64, 0, min(w.nbit+1, 1<<20)) // a trie has at most one leaf per code bit, plus one
	} else if i > 0 {
		w.memo = memo
	}
	switch {
	case !w.visit(begin, at.S, at.V, at.Res):
		return nil, w.bad
	case w.pos != w.nbit:
		return nil, malformed(base+chunkHead, "chunk %d: %d code bits are left after the last class of depth %d", i, w.nbit-w.pos, w.end)
	}
	if w.found != nil {
		joined, deltas, fl := readJoins(rest, len(w.found), i, base+int64(len(rec)-len(rest)))
		if fl != nil {
			return nil, fl
		}
		for x, r := range w.found {
			if joined[x] && w.judging() {
				w.claim = p.join(w, r, deltas[x])
				if w.tally.joins++; p.keep {
					w.tally.Joined = append(w.tally.Joined, r)
				}
			}
		}
	}
	if w.claim != nil || !judge {
		return nil, w.claim
	}
	return &w.tally, nil
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
		if ok && c == 1 {
			var y uint64
			y, ok = w.bit()
			joined[x], deltas[x] = true, 1
			if y == 1 {
				explicit = append(explicit, x)
			}
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
		v, m := uvarint(rest)
		if m == 0 || v > 1<<64-3 { // delta = 2 + v stays within 64 bits
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

// uvarint reads an unsigned varint and returns it with its length, or
// length 0 if it is cut off, above 2^64 - 1, or not the shortest form.
func uvarint(b []byte) (uint64, int) {
	var v uint64
	for i := 0; i < len(b) && i < 10; i++ {
		if i == 9 && b[i] > 1 {
			return 0, 0 // beyond 64 bits
		}
		v |= uint64(b[i]&0x7f) << (7 * i)
		if b[i] < 0x80 {
			if b[i] == 0 && i > 0 {
				return 0, 0 // a longer form of a smaller varint
			}
			return v, i + 1
		}
	}
	return 0, 0
}

// join checks that survivor r mod 2^k joins r - delta (SPEC.md, section 8):
// after k steps both have the same odd steps and the same value.
func (p *Params) join(w *walk, r, delta uint64) *Failure {
	if delta > r {
		return invalid(ReasonJoin, w.where(r, p.J, fmt.Sprintf("joins the residue %d below it", delta), "a partner 0 <= r' < r", fmt.Sprintf("r - %d < 0", delta)),
			"the partner of a join must be a residue 0 <= r' < r; r - %d is below zero", delta)
	}
	q := r - delta
	s1, v1, b1 := p.afterK(r)
	s2, v2, b2 := p.afterK(q)
	switch claim := func() string { return fmt.Sprintf("joins %d mod 2^%d", q, p.J) }; {
	case s1 != s2:
		return invalid(ReasonJoin, w.where(r, p.J, claim(), fmt.Sprintf("%d odd steps for both", s1), fmt.Sprintf("%d for the partner", s2)),
			"after %d steps class %d has %d odd steps and %d mod 2^%d has %d: their paths can meet for some q at most, not for all", p.J, r, s1, q, p.J, s2)
	case !(b1 == nil && b2 == nil && v1 == v2) && val(v1, b1).Cmp(val(v2, b2)) != 0:
		return invalid(ReasonJoin, w.where(r, p.J, claim(), "the same value after k steps", val(v1, b1).String()+" and "+val(v2, b2).String()),
			"T^%d(%d) = %v but T^%d(%d) = %v: the paths do not meet", p.J, r, val(v1, b1), p.J, q, val(v2, b2))
	}
	return nil
}

// val is a result of afterK as one number.
func val(v uint64, b *big.Int) *big.Int {
	if b != nil {
		return b
	}
	return new(big.Int).SetUint64(v)
}

// afterK follows x for k steps exactly and returns the odd steps and
// T^k(x): in v while the steps fit in 64 bits (b is then nil), else in b.
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
