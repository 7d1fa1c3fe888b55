package check

import (
	"fmt"
	"math/big"
	"math/bits"
	"strconv"
)

// Joins (SPEC.md, section 8): survivor r mod 2^k joins r' = r - delta when
// delta > 0 and after k steps both have the same number of odd steps and
// the same value; then every member 2^k*q + r meets 2^k*q + r' after k
// steps. The checker follows both residues itself.

// maxJoinSurvivors bounds the survivors of one chunk of a sieve with joins.
const maxJoinSurvivors = 1 << 22

// readJoins reads a join section for n survivors (SPEC.md, section 8):
// a code per survivor (0: not joined; 10: joined to r - 1; 11: joined to
// r - delta, delta = 2 + the next varint), zero bits to a whole byte, then
// one unsigned shortest-form varint of at most 2^64 - 3 per code 11, using
// every byte. It returns whether each survivor is joined and its delta;
// at is the section's offset.
func readJoins(rest []byte, n, chunk int, at int64) ([]bool, []uint64, *Failure) {
	if need := (n + 7) / 8; len(rest) < need {
		return nil, nil, malformed(at, "chunk %d: the join codes of %d survivors need at least %d bytes, the section has %d", chunk, n, need, len(rest))
	}
	joined, deltas := make([]bool, n), make([]uint64, n)
	pos, nbit := 0, 8*len(rest)
	bit := func() (byte, bool) {
		if pos >= nbit {
			return 0, false
		}
		b := rest[pos/8] >> (7 - pos%8) & 1
		pos++
		return b, true
	}
	var explicit []int
	for x := range n {
		c, ok := bit()
		if ok && c == 1 {
			var y byte
			y, ok = bit()
			joined[x], deltas[x] = true, 1
			if y == 1 {
				explicit = append(explicit, x)
			}
		}
		if !ok {
			return nil, nil, malformed(at, "chunk %d: the join codes of %d survivors need more than the section's %d bytes", chunk, n, len(rest))
		}
	}
	nb := (pos + 7) / 8
	if pos%8 != 0 && rest[nb-1]<<(pos%8) != 0 {
		return nil, nil, malformed(at+int64(nb)-1, "chunk %d: padding bits after the join codes are not zero", chunk)
	}
	rest, at = rest[nb:], at+int64(nb)
	for _, x := range explicit {
		v, m := uvarint(rest)
		if m <= 0 || v > maxJoinVarint {
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

// maxJoinVarint keeps delta = 2 + v within 64 bits.
const maxJoinVarint = 1<<64 - 3

// uvarint reads an unsigned varint: groups of 7 bits, least significant
// first, the high bit set on every byte but the last. It returns the value
// and its length, or length 0 if it is cut off, longer than 10 bytes, above
// 2^64 - 1, or not the shortest form (a last byte 00 after another byte).
func uvarint(b []byte) (uint64, int) {
	var v uint64
	for i := 0; i < len(b) && i < 10; i++ {
		c := b[i]
		if i == 9 && c > 1 {
			return 0, 0 // beyond 64 bits
		}
		v |= uint64(c&0x7f) << (7 * i)
		if c < 0x80 {
			if c == 0 && i > 0 {
				return 0, 0 // a longer form of a smaller varint
			}
			return v, i + 1
		}
	}
	return 0, 0
}

// checkJoins reads the join section of a chunk whose survivors are
// w.found and checks every join it claims; at is the section's offset.
func (sv *sieve) checkJoins(w *walk, at int64) *Failure {
	joined, deltas, fl := readJoins(w.rest, len(w.found), w.chunk, at)
	if fl != nil {
		return fl
	}
	if sv.keepJoins {
		w.flags = make([]uint64, (len(w.found)+63)/64)
	}
	for x, r := range w.found {
		if !joined[x] {
			continue
		}
		if w.flags != nil {
			w.flags[x/64] |= 1 << (x % 64)
		}
		if fl := sv.join(w, r, deltas[x]); fl != nil {
			return fl
		}
		w.joined++
	}
	return nil
}

// join checks that survivor r mod 2^k joins r - delta, delta >= 1.
func (sv *sieve) join(w *walk, r uint64, delta uint64) *Failure {
	if delta > r {
		return invalid(ReasonJoin, w.where(r, sv.j, fmt.Sprintf("joins the residue %d below it", delta), "a partner 0 <= r' < r", fmt.Sprintf("r - %d < 0", delta)),
			"the partner of a join must be a residue 0 <= r' < r; r - %d is below zero", delta)
	}
	p := r - delta
	claim := func() string { return fmt.Sprintf("joins %d mod 2^%d", p, sv.j) }
	s1, v1, b1 := sv.afterK(r)
	s2, v2, b2 := sv.afterK(p)
	switch {
	case s1 != s2:
		return invalid(ReasonJoin, w.where(r, sv.j, claim(), fmt.Sprintf("%d odd steps for both", s1), fmt.Sprintf("%d for the partner", s2)),
			"after %d steps class %d has %d odd steps and %d mod 2^%d has %d: their paths can meet for some q at most, not for all", sv.j, r, s1, p, sv.j, s2)
	case !sameValue(v1, b1, v2, b2):
		show := func(v uint64, b *big.Int) string {
			if b != nil {
				return b.String()
			}
			return strconv.FormatUint(v, 10)
		}
		return invalid(ReasonJoin, w.where(r, sv.j, claim(), "the same value after k steps", show(v1, b1)+" and "+show(v2, b2)),
			"T^%d(%d) = %s but T^%d(%d) = %s: the paths do not meet", sv.j, r, show(v1, b1), sv.j, p, show(v2, b2))
	}
	return nil
}

// sameValue compares two results of afterK, either of which may be big.
func sameValue(v1 uint64, b1 *big.Int, v2 uint64, b2 *big.Int) bool {
	if b1 == nil && b2 == nil {
		return v1 == v2
	}
	if b1 == nil {
		b1 = new(big.Int).SetUint64(v1)
	}
	if b2 == nil {
		b2 = new(big.Int).SetUint64(v2)
	}
	return b1.Cmp(b2) == 0
}

// afterK follows x for k steps exactly and returns the odd steps and
// T^k(x): in 64 bits while they suffice (big is nil), else in big.
func (sv *sieve) afterK(x uint64) (s int, v uint64, big_ *big.Int) {
	for t := 0; t < sv.j; t++ {
		if x&1 == 0 {
			x >>= 1
			continue
		}
		hi, lo := bits.Mul64(x, sv.a)
		lo, c := bits.Add64(lo, uint64(int64(sv.h.b)), 0)
		if sv.h.b < 0 {
			c-- // the carry of adding b in two's complement, less one
		}
		if hi+c != 0 {
			z := new(big.Int).SetUint64(x)
			for ; t < sv.j; t++ {
				if sv.apply(z) {
					s++
				}
			}
			return s, 0, z
		}
		x = lo >> 1
		s++
	}
	return s, x, nil
}
