package emit

import (
	"math/big"
	"math/bits"
)

// The search's inner loop takes steps in bunches, with a small sieve on
// the low bits of the value. For x = 2^i*q + r, T^i(x) = a^s*q + T^i(r). Let
// i1 be the first step at which the parity vector of x mod 2^m closes
// (a^s < 2^i1), or m if it does not: before i1 every prefix has a^s >= 2^i,
// and with b > 0 also c >= 0, so T^i(x) >= x >= n there, and no drop can be
// missed. One table lookup thus advances i1 steps (about 3.3 on average for
// m = 12) and the value is compared with n only where it can have dropped.

const jumpBits = 12

// jumpEntry is one table entry: d = T^i1(x mod 2^i1), a^s, and in meta
// i1 (bits 0..7) and bit 8 set when the parity vector closes at i1, so that
// a drop is possible there.
type jumpEntry struct{ d, mul, meta uint64 }

func (e jumpEntry) steps() uint { return uint(e.meta & 0xff) }
func (e jumpEntry) shut() bool  { return e.meta>>8&1 == 1 }

// jumpTable builds the table for a map with b > 0, or returns nil when an
// entry would not fit 64 bits exactly (then the search steps one at a
// time). It also returns the bound on the high word of x below which a
// lookup stays within 128 bits: the product a^s*(x >> i1) is below
// x*a^12/2, so x must stay below 2^(129 - bits(a^12)).
func (r *rules) jumpTable() ([]jumpEntry, uint64) {
	if r.m.B <= 0 {
		return nil, 0 // b < 0: prefixes have c < 0, and a drop can come early
	}
	top := new(big.Int).Exp(r.bigA, big.NewInt(jumpBits), nil)
	if top.BitLen() > 63 {
		return nil, 0
	}
	limit := uint64(1) << (65 - top.BitLen() - 1)
	t := make([]jumpEntry, 1<<jumpBits)
	for l := range t {
		x, s, steps, shut := new(big.Int).SetInt64(int64(l)), 0, jumpBits, uint64(0)
		for i := 1; i <= jumpBits; i++ {
			if r.step(x) {
				s++
			}
			if new(big.Int).Exp(r.bigA, big.NewInt(int64(s)), nil).BitLen() <= i { // a^s < 2^i
				steps, shut = i, 1
				break
			}
		}
		// x is T^i1(l); subtract the part that comes from the bits of l
		// above i1, a^s times l >> i1, to leave T^i1(l mod 2^i1).
		mul := new(big.Int).Exp(r.bigA, big.NewInt(int64(s)), nil)
		d := x.Sub(x, new(big.Int).Mul(mul, big.NewInt(int64(l>>steps))))
		if d.Sign() < 0 || d.BitLen() > 64 || mul.BitLen() > 64 {
			return nil, 0
		}
		t[l] = jumpEntry{d: d.Uint64(), mul: mul.Uint64(), meta: uint64(steps) | shut<<8}
	}
	return t, limit
}

// searchJump is the inner loop of the search with the table: x = T^i(n),
// exact in 128 bits. It returns the stopping time, or 0 when the value
// nears 2^128 or the steps pass the cap, for the general path to finish.
func searchJump(tab []jumpEntry, limit uint64, n uint64, hi, lo uint64, i uint32, cap uint32) uint32 {
	steps := uint64(i)
	for steps <= uint64(cap) {
		if hi >= limit {
			return 0
		}
		e := tab[lo&(1<<jumpBits-1)]
		sh, m := e.steps(), e.mul
		qlo, qhi := lo>>sh|hi<<(64-sh), hi>>sh
		ph, pl := bits.Mul64(qlo, m)
		ph += qhi * m
		var c uint64
		lo, c = bits.Add64(pl, e.d, 0)
		hi = ph + c
		steps += uint64(sh)
		if e.shut() && hi == 0 && lo < n {
			if steps > uint64(cap) {
				return 0
			}
			return uint32(steps)
		}
	}
	return 0
}

// jumpJob is a number n with x = T^i(n) for the two-lane search; sigma
// receives its stopping time, or 0 if the general path must finish it.
type jumpJob struct {
	n, hi, lo uint64
	i, sigma  uint32
}

// searchJump2 runs searchJump on jobs two at a time: the lookups of one
// number are a chain of dependent loads and multiplications, and two
// independent chains overlap. It has no closures, so that both lanes stay
// in registers; the two lanes are written out twice on purpose.
func searchJump2(tab []jumpEntry, jumpLimit uint64, jobs []jumpJob, cap uint32) {
	if len(jobs) == 0 {
		return
	}
	const mask = 1<<jumpBits - 1
	limit := uint64(cap)
	a, b := 0, 1
	next := 2
	ha, la, na, sa := jobs[0].hi, jobs[0].lo, jobs[0].n, uint64(jobs[0].i)
	var hb, lb, nb, sb uint64
	if len(jobs) > 1 {
		hb, lb, nb, sb = jobs[1].hi, jobs[1].lo, jobs[1].n, uint64(jobs[1].i)
	} else {
		b = -1
	}
	for a >= 0 || b >= 0 {
		if a >= 0 {
			e := tab[la&mask]
			sh := e.steps()
			ph, pl := bits.Mul64(la>>sh|ha<<(64-sh), e.mul)
			ph += ha >> sh * e.mul
			var c uint64
			la, c = bits.Add64(pl, e.d, 0)
			ha = ph + c
			sa += uint64(sh)
			if (e.shut() && ha == 0 && la < na) || sa > limit || ha >= jumpLimit {
				if ha == 0 && la < na && sa <= limit && e.shut() {
					jobs[a].sigma = uint32(sa)
				}
				if a = -1; next < len(jobs) {
					a = next
					ha, la, na, sa = jobs[a].hi, jobs[a].lo, jobs[a].n, uint64(jobs[a].i)
					next++
				}
			}
		}
		if b >= 0 {
			e := tab[lb&mask]
			sh := e.steps()
			ph, pl := bits.Mul64(lb>>sh|hb<<(64-sh), e.mul)
			ph += hb >> sh * e.mul
			var c uint64
			lb, c = bits.Add64(pl, e.d, 0)
			hb = ph + c
			sb += uint64(sh)
			if (e.shut() && hb == 0 && lb < nb) || sb > limit || hb >= jumpLimit {
				if hb == 0 && lb < nb && sb <= limit && e.shut() {
					jobs[b].sigma = uint32(sb)
				}
				if b = -1; next < len(jobs) {
					b = next
					hb, lb, nb, sb = jobs[b].hi, jobs[b].lo, jobs[b].n, uint64(jobs[b].i)
					next++
				}
			}
		}
	}
}
