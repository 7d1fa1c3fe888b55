package check

import (
	"math/bits"

	"descent/check/kernel"
)

// jumpBits is how many steps of T one table lookup takes: 2^10 entries of
// 32 bytes stay in the first-level cache.
const jumpBits = 10

// jumpEntry is the table's entry for the residue R mod 2^jumpBits:
// T^jumpBits(2^jumpBits*q + R) = mult*q + v, and no iterate on the way
// falls below n/2^shift (kernel.Jump).
type jumpEntry struct {
	ok      bool // re-derived by kernel.Params.ValidJump
	shift   uint
	mult, v uint64
}

// jumpTable builds the table by this file's own arithmetic and keeps each
// entry only if the kernel re-derives it: a wrong entry costs speed, never
// soundness. It is nil where the table does not apply: b < 0 (the additive
// terms may be negative) or a^jumpBits too wide for the 128-bit search.
// Below lim (the high word of x), a jump and the steps it stands for stay
// within 128 bits.
func jumpTable(p *kernel.Params) (tab []jumpEntry, lim uint64) {
	a, b := uint64(p.A), int64(p.B)
	mult := uint64(1)
	for range jumpBits {
		hi, lo := bits.Mul64(mult, a)
		if hi != 0 || lo >= 1<<40 {
			return nil, 0
		}
		mult = lo
	}
	if b < 0 {
		return nil, 0
	}
	tab = make([]jumpEntry, 1<<jumpBits)
	for r := range uint64(1) << jumpBits {
		v, odd, shift := r, 0, uint(0)
		pow := uint64(1) // a^odd
		for j := 1; j <= jumpBits; j++ {
			if v&1 == 0 {
				v >>= 1
			} else {
				v, odd, pow = (a*v+uint64(b))>>1, odd+1, pow*a
			}
			// shift must make a^odd * 2^shift >= 2^j.
			for pow<<shift < 1<<j {
				shift++
			}
		}
		e := jumpEntry{shift: shift, mult: pow, v: v}
		e.ok = p.ValidJump(kernel.Jump{M: jumpBits, Odd: odd, Shift: int(shift), R: r, Mult: pow, V: v})
		tab[r] = e
	}
	return tab, ^uint64(0) / 2 / mult
}

// atLeast says whether (hi:lo) >> shift >= n, that is hi:lo >= n*2^shift.
func atLeast(hi, lo uint64, shift uint, n uint64) bool {
	return hi>>shift != 0 || lo>>shift|hi<<(64-shift) >= n
}
