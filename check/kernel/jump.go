package kernel

import "math/big"

// Jump is what the first M steps of T do to every n = 2^M*q + R (SPEC.md,
// section 1): T^M(n) = Mult*q + V with Mult = a^Odd; and, for b >= 0,
// every T^j(n), j <= M, is at least n/2^Shift. A fast search takes M steps
// at once by such an entry only once ValidJump has re-derived it here.
type Jump struct {
	M, Odd, Shift int
	R, Mult, V    uint64
}

// ValidJump says whether e is true, by stepping R in math/big: T^j(n) =
// (a^s_j*n + c_j)/2^j with c_j >= 0 when b >= 0, so a^s_j*2^Shift >= 2^j
// bounds every iterate below by n/2^Shift.
func (p *Params) ValidJump(e Jump) bool {
	if p.B < 0 || e.M < 1 || e.M > 32 || e.R>>e.M != 0 {
		return false
	}
	x, s := new(big.Int).SetUint64(e.R), 0
	for j := 1; j <= e.M; j++ {
		if p.apply(x) {
			s++
		}
		if new(big.Int).Lsh(p.pow(s), uint(e.Shift)).Cmp(new(big.Int).Lsh(big.NewInt(1), uint(j))) < 0 {
			return false
		}
	}
	return s == e.Odd && x.IsUint64() && x.Uint64() == e.V && p.pow(s).Cmp(new(big.Int).SetUint64(e.Mult)) == 0
}
