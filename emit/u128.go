package emit

import (
	"math/big"
	"math/bits"
)

// u128 is an exact unsigned 128-bit integer. Every operation that could
// exceed 128 bits reports it, and the caller moves to math/big: nothing
// wraps.
type u128 struct{ hi, lo uint64 }

func (x u128) less(y u128) bool { return x.hi < y.hi || (x.hi == y.hi && x.lo < y.lo) }

func (x u128) rsh1() u128 { return u128{x.hi >> 1, x.lo>>1 | x.hi<<63} }

func (x u128) add(y u128) (u128, bool) {
	lo, c := bits.Add64(x.lo, y.lo, 0)
	hi, c := bits.Add64(x.hi, y.hi, c)
	return u128{hi, lo}, c == 0
}

// mul64 returns x*m.
func (x u128) mul64(m uint64) (u128, bool) {
	h1, lo := bits.Mul64(x.lo, m)
	h2, l2 := bits.Mul64(x.hi, m)
	hi, c := bits.Add64(h1, l2, 0)
	return u128{hi, lo}, h2 == 0 && c == 0
}

// addSigned returns x + b for a small signed b, failing below zero.
func (x u128) addSigned(b int64) (u128, bool) {
	if b >= 0 {
		return x.add(u128{0, uint64(b)})
	}
	lo, borrow := bits.Sub64(x.lo, uint64(-b), 0)
	hi, borrow := bits.Sub64(x.hi, 0, borrow)
	return u128{hi, lo}, borrow == 0
}

func (x u128) big() *big.Int {
	z := new(big.Int).SetUint64(x.hi)
	return z.Lsh(z, 64).Or(z, new(big.Int).SetUint64(x.lo))
}

// toU128 converts a non-negative x that fits in 128 bits.
func toU128(x *big.Int) (u128, bool) {
	if x.Sign() < 0 || x.BitLen() > 128 {
		return u128{}, false
	}
	lo := new(big.Int).And(x, new(big.Int).SetUint64(^uint64(0))).Uint64()
	return u128{new(big.Int).Rsh(x, 64).Uint64(), lo}, true
}
