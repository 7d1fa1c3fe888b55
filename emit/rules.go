package emit

import (
	"errors"
	"fmt"
	"math/big"

	"descent/cert"
)

// rules holds what the sieve walk needs about a map, all of it exact.
//
// The walk follows T^t(r) only modulo 2^64, with wrap-around on purpose: the
// parity of step t of every member of r mod 2^t's children depends only on
// T^t(r) mod 2^(j-t) (SPEC.md, "Why the walk may work modulo 2^64"), and
// each step loses one low bit of precision, so 64 bits carry every parity
// up to j = 64 exactly. Nothing the walk reports as an integer comes from
// that modular value: closing tests use exact bit lengths of a^s, and
// thresholds and exceptions use math/big.
type rules struct {
	m    cert.Map
	a, b uint64 // b in two's complement: a*v + b is exact mod 2^64
	k, j int
	pow  []uint64 // a^s mod 2^64, s = 0..j
	bitl []int    // bit length of a^s: the class closes at t iff bitl[s] <= t
	// a^s exactly, where it fits 128 bits (powFits[s]).
	powU    []u128
	powFits []bool
	limHi   uint64 // while x>>64 < limHi, a step of the search fits 128 bits
	jump    []jumpEntry
	jumpLim uint64 // the table serves values whose high word is below it
	bigA    *big.Int
	bigB    *big.Int
	limit   int    // cap on the exception search, in numbers tested
	ceiling int    // W: following an orbit stops, undecided, at an iterate of 2^W or more
	work    *meter // cancellation; nil: none
}

// maxExceptionSearch caps the numbers the exception search tests: one walk
// of at most j steps each. Ordinary maps need a few hundred (3n+1 at j = 64:
// about 600); a map that needs more than 2^20 is refused rather than run for
// minutes.
const maxExceptionSearch = 1 << 20

func newRules(m cert.Map, k, j int) (*rules, error) {
	if err := m.Validate(); err != nil {
		return nil, err
	}
	if k < 1 || k > cert.MaxK || j < 1 || j > k {
		return nil, fmt.Errorf("k = %d, j = %d: want 1 <= j <= k <= %d", k, j, cert.MaxK)
	}
	r := &rules{m: m, a: uint64(m.A), b: uint64(int64(m.B)), k: k, j: j,
		bigA: big.NewInt(int64(m.A)), bigB: big.NewInt(int64(m.B)), limit: maxExceptionSearch, ceiling: cert.MaxCeiling}
	// x/2 + x*(a-1)/2 + (b+1)/2 < 2^128 when x>>64 < (2^64-1)/a - 1:
	// then x < 2^128/a - 2^64 and |b| < 2^32 leaves room.
	r.limHi = ^uint64(0)/r.a - 1
	p := big.NewInt(1)
	for s := 0; s <= j+1; s++ {
		r.pow = append(r.pow, p.Uint64()) // the low 64 bits: a^s mod 2^64
		r.bitl = append(r.bitl, p.BitLen())
		u, ok := toU128(p)
		r.powU, r.powFits = append(r.powU, u), append(r.powFits, ok)
		p.Mul(p, r.bigA)
	}
	r.jump, r.jumpLim = r.jumpTable()
	return r, nil
}

// closes reports whether a class at depth t with s odd steps among its
// first t closes there: a^s < 2^t.
func (r *rules) closes(t, s int) bool { return r.bitl[s] <= t }

// counts runs the walk over (depth, odd steps) pairs instead of classes:
// whether a class closes depends only on that pair, so the number of open
// classes and of closings at every depth follows from a table of j^2
// entries. The emitter writes the header from it before the long walk and
// then checks the walk against it.
func (r *rules) counts() (closedAt, openAt []uint64) {
	closedAt = make([]uint64, r.j+1)
	openAt = make([]uint64, r.j+1)
	cur := []uint64{1}
	openAt[0] = 1
	for t := 0; t < r.j; t++ {
		next := make([]uint64, len(cur)+1)
		for s, c := range cur {
			if c == 0 {
				continue
			}
			if r.closes(t+1, s) { // the child with an even step closes
				closedAt[t+1] += c
			} else {
				next[s] += c
			}
			next[s+1] += c // the child with an odd step never closes there
		}
		for _, c := range next {
			openAt[t+1] += c
		}
		cur = next
	}
	return closedAt, openAt
}

// exceptionBound returns N such that every exception is at most N
// (SPEC.md, "Exceptions"): for a class closing at t with s odd steps,
// c <= s*b*a^s/2, so members at or below c/(2^t - a^s) are at most
// s*b*a^s / (2*(2^t - a^s)). The pairs (t, s) that can close are those with
// t the bit length of a^s.
func (r *rules) exceptionBound() *big.Int {
	best := new(big.Int)
	if r.m.B < 0 {
		return best // c < 0: every member n >= 1 is above its threshold
	}
	p := big.NewInt(1)
	for s := 0; s <= r.j; s++ {
		if t := r.bitl[s]; t <= r.j && s > 0 {
			num := new(big.Int).Mul(p, big.NewInt(int64(s)))
			num.Mul(num, r.bigB)
			den := new(big.Int).Lsh(big.NewInt(1), uint(t))
			den.Sub(den, p).Lsh(den, 1)
			if q := num.Quo(num, den); q.Cmp(best) > 0 {
				best = q
			}
		}
		p.Mul(p, r.bigA)
	}
	return best
}

var errSearchTooLarge = errors.New("exception search too large")

// exceptions finds every member of a closed class at or below its class's
// threshold, by testing every n up to the bound, and decides each one's
// fate within cap steps.
func (r *rules) exceptions(cap uint32) ([]cert.Exception, error) {
	bound := r.exceptionBound()
	if !bound.IsInt64() || bound.Int64() > int64(r.limit) {
		return nil, fmt.Errorf("%w: map %v with j = %d needs every n up to %v tested; this program stops at %d",
			errSearchTooLarge, r.m, r.j, bound, r.limit)
	}
	var out []cert.Exception
	x := new(big.Int)
	for n := int64(1); n <= bound.Int64(); n++ {
		if n&4095 == 0 && r.work != nil && r.work.ctx.Err() != nil {
			return nil, r.work.ctx.Err()
		}
		x.SetInt64(n)
		s := 0
		for t := 1; t <= r.j; t++ {
			if r.step(x) {
				s++
			}
			if r.closes(t, s) {
				if x.Cmp(big.NewInt(n)) >= 0 { // T^t(n) >= n: at or below the threshold
					out = append(out, r.fate(big.NewInt(n), cap))
					if err := r.work.failed(); err != nil {
						return nil, err
					}
				}
				break
			}
		}
	}
	return out, r.work.failed()
}

// step replaces x by T(x) and reports whether the step was odd.
func (r *rules) step(x *big.Int) bool {
	if x.Bit(0) == 0 {
		x.Rsh(x, 1)
		return false
	}
	x.Mul(x, r.bigA).Add(x, r.bigB).Rsh(x, 1)
	return true
}

// fate iterates n directly (SPEC.md, "Fates"). With x_i = T^i(n): at the
// first i <= cap with x_i < n it descends, and at the first with x_i >=
// 2^W (the ceiling) before that it is undecided; otherwise the orbit
// repeats within x_0..x_cap exactly when x_cap equals an earlier x_i, and
// then x_cap lies on the cycle, whose smallest member is found by going
// round it once. Three passes of at most cap steps on values below 2^W,
// constant memory.
//
// Once the meter fails (cancellation), fate returns an undecided
// placeholder and the caller reports the meter's error.
func (r *rules) fate(n *big.Int, cap uint32) cert.Exception {
	e := cert.Exception{N: n, Fate: cert.Undecided}
	x := new(big.Int).Set(n)
	for i := uint32(1); i <= cap; i++ {
		if r.step(x); !r.work.charge(x) {
			return e
		}
		if x.Cmp(n) < 0 {
			e.Fate, e.Steps = cert.Descends, i
			return e
		}
		if x.BitLen() > r.ceiling {
			return e
		}
	}
	last := new(big.Int).Set(x)
	x.Set(n)
	for i := uint32(0); i < cap; i++ {
		if x.Cmp(last) == 0 {
			m := new(big.Int).Set(last)
			for r.step(x); x.Cmp(last) != 0; r.step(x) {
				if !r.work.charge(x) {
					return e
				}
				if x.Cmp(m) < 0 {
					m.Set(x)
				}
			}
			e.Fate, e.CycleMin = cert.Cycle, m
			return e
		}
		if r.step(x); !r.work.charge(x) {
			return e
		}
	}
	return e
}
