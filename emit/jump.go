package emit

import "math/bits"

// The search's inner loop takes steps in bunches, with a small sieve on
// the low bits of the value. For x = 2^i*q + r, T^i(x) = a^s*q + T^i(r). Let
// i1 be the first step at which the parity vector of x mod 2^m closes
// (a^s < 2^i1), or m if it does not: before i1 every prefix has a^s >= 2^i,
// and with b > 0 also c >= 0, so T^i(x) >= x >= n there, and no drop can be
// missed. One table lookup thus advances i1 steps (about 3.3 on average for
// m = 12) and the value is compared with n only where it can have dropped.

const jumpBits = 12

// jumpLimit bounds the high word of x in the table loop: a lookup that does
// not close multiplies by at most a^12 / 2^12 (2^7.1 for a = 3, 2^35 for
// a = 37), so x < 2^118 leaves room for every map the table serves (a^12
// < 2^64) below 2^128 after the step.
const jumpLimit = 1 << 54

// jumpEntry is one table entry: d = T^i1(x mod 2^i1) in bits 0..39, i1 in
// bits 48..55, bit 56 set when the parity vector closes at i1 (a drop is
// possible there), and a^s beside it, so that one lookup gives both
// without a second dependent load. The table is 64 KiB.
type jumpEntry struct{ w, mul uint64 }

func (e jumpEntry) d() uint64   { return e.w & (1<<40 - 1) }
func (e jumpEntry) steps() uint { return uint(e.w >> 48 & 0xff) }
func (e jumpEntry) shut() bool  { return e.w>>56&1 == 1 }

// jumpTable builds the table for a map with b > 0 whose a^m fits 64 bits,
// or returns nil.
func (r *rules) jumpTable() []jumpEntry {
	if r.m.B <= 0 || r.a > 37 {
		return nil // b < 0: prefixes have c < 0; a > 37: a^12 passes 2^63
	}
	t := make([]jumpEntry, 1<<jumpBits)
	for l := range t {
		x, s, steps, shut := uint64(l), 0, jumpBits, uint64(0)
		for i := 1; i <= jumpBits; i++ {
			if x&1 == 1 {
				x = (r.a*x + uint64(r.m.B)) >> 1
				s++
			} else {
				x >>= 1
			}
			if bits.Len64(pow64(r.a, s)) <= i { // a^s < 2^i
				steps, shut = i, 1
				break
			}
		}
		// x is T^i1(l); subtract the part that comes from the bits of l
		// above i1, a^s times l >> i1, to leave T^i1(l mod 2^i1), which is
		// below 2^i1 * (a+1)^i1 / 2^i1 < 2^40 for a <= 37.
		d := x - pow64(r.a, s)*(uint64(l)>>steps)
		t[l] = jumpEntry{w: d | uint64(steps)<<48 | shut<<56, mul: pow64(r.a, s)}
	}
	return t
}

// searchJump is the inner loop of the search with the table: x = T^i(n),
// exact in 128 bits. It returns the stopping time, or 0 when the value
// nears 2^128 or the steps pass the cap, for the general path to finish.
func searchJump(tab []jumpEntry, n uint64, hi, lo uint64, i uint32, cap uint32) uint32 {
	steps := uint64(i)
	for steps <= uint64(cap) {
		if hi >= jumpLimit {
			return 0
		}
		e := tab[lo&(1<<jumpBits-1)]
		sh, m := e.steps(), e.mul
		qlo, qhi := lo>>sh|hi<<(64-sh), hi>>sh
		ph, pl := bits.Mul64(qlo, m)
		ph += qhi * m
		var c uint64
		lo, c = bits.Add64(pl, e.d(), 0)
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

func pow64(a uint64, s int) uint64 {
	p := uint64(1)
	for range s {
		p *= a
	}
	return p
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
func searchJump2(tab []jumpEntry, jobs []jumpJob, cap uint32) {
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
			la, c = bits.Add64(pl, e.d(), 0)
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
			lb, c = bits.Add64(pl, e.d(), 0)
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
