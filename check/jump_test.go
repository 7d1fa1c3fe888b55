package check

import (
	"math/big"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/check/kernel"
)

// The jump table's entries, written here, are true: the kernel keeps
// every one, and each takes jumpBits steps of T as math/big does one at a
// time (the reference outside this package), for numbers near 2^60 and
// 2^100.
func TestJumpEntriesAreKeptAndTrue(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, m := range []kernel.Map{{A: 3, B: 1}, {A: 5, B: 1}, {A: 3, B: 5}, {A: 7, B: 1}} {
		p := kernel.NewParams(m, 16)
		tab, _ := jumpTable(p)
		require.Len(t, tab, 1<<jumpBits, "%v", m)
		for r, e := range tab {
			require.True(t, e.ok, "%v: the entry for %d was not kept", m, r)
		}
		for range 2000 {
			n := new(big.Int).Lsh(big.NewInt(int64(rng.Uint64()>>1)), uint(rng.IntN(40)))
			n.Add(n, big.NewInt(int64(rng.Uint64()>>1)))
			e := tab[n.Uint64()&(1<<jumpBits-1)]
			x, least := new(big.Int).Set(n), new(big.Int).Set(n)
			for range jumpBits {
				if x.Bit(0) == 1 {
					x.Mul(x, big.NewInt(int64(m.A))).Add(x, big.NewInt(int64(m.B)))
				}
				x.Rsh(x, 1)
				if x.Cmp(least) < 0 {
					least.Set(x)
				}
			}
			q := new(big.Int).Rsh(n, jumpBits)
			want := q.Mul(q, new(big.Int).SetUint64(e.mult)).Add(q, new(big.Int).SetUint64(e.v))
			require.Equal(t, 0, x.Cmp(want), "%v: T^%d(%v)", m, jumpBits, n)
			require.True(t, new(big.Int).Lsh(least, e.shift).Cmp(n) >= 0, "%v: an iterate of %v falls below n/2^%d", m, n, e.shift)
		}
	}
	tab, _ := jumpTable(kernel.NewParams(kernel.Map{A: 3, B: -1}, 16))
	require.Nil(t, tab, "3n-1: additive terms may be negative")
}

// A wrong entry is refused by the kernel, so that it costs speed only.
func TestWrongJumpEntriesAreRefused(t *testing.T) {
	p := kernel.NewParams(kernel.Map{A: 3, B: 1}, 16)
	tab, _ := jumpTable(p)
	for _, r := range []uint64{0, 1, 7, 27, 1<<jumpBits - 1} {
		e := tab[r]
		good := kernel.Jump{M: jumpBits, Shift: int(e.shift), R: r, Mult: e.mult, V: e.v}
		for pow3(good.Odd) != e.mult { // the entry keeps a^odd, not odd
			good.Odd++
		}
		require.True(t, p.ValidJump(good), "r = %d", r)
		for name, bad := range map[string]kernel.Jump{
			"value":      {M: good.M, Odd: good.Odd, Shift: good.Shift, R: r, Mult: good.Mult, V: good.V + 1},
			"odd steps":  {M: good.M, Odd: good.Odd + 1, Shift: good.Shift, R: r, Mult: good.Mult * 3, V: good.V},
			"multiplier": {M: good.M, Odd: good.Odd, Shift: good.Shift, R: r, Mult: good.Mult + 2, V: good.V},
			"residue":    {M: good.M, Odd: good.Odd, Shift: good.Shift, R: r + 1<<jumpBits, Mult: good.Mult, V: good.V},
		} {
			require.False(t, p.ValidJump(bad), "r = %d: a wrong %s is kept", r, name)
		}
		if good.Shift > 0 {
			bad := good
			bad.Shift--
			require.False(t, p.ValidJump(bad), "r = %d: a shift too small is kept", r)
		}
	}
	require.False(t, kernel.NewParams(kernel.Map{A: 3, B: -1}, 16).ValidJump(kernel.Jump{M: 1, Odd: 0, R: 0, Mult: 1, V: 0}), "b < 0")
}

func pow3(o int) uint64 {
	x := uint64(1)
	for range o {
		x *= 3
	}
	return x
}
