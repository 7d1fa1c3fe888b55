package emit

import (
	"bytes"
	"context"
	"math/big"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

// rangeBoth writes the range certificate with the two-lane search, the
// rule masks and the join flags of CheckSieveRoot, and with all of them
// turned off (each member tried against each rule and searched alone, the
// flags computed by the range), and returns both files.
func rangeBoth(t testing.TB, m cert.Map, k int, joins bool, rules bool, lo, hi *big.Int, e int) (fast, slow []byte, res *RangeResult) {
	t.Helper()
	var sf memFile
	sres, err := Sieve(context.Background(), &sf, SieveParams{Map: m, K: k, J: k, Joins: joins}, Options{})
	require.NoError(t, err)
	p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: lo, Hi: hi, E: e}
	if rules {
		p.Rules = AutoRules(m)
	}
	// The fast run takes the join flags from the sieve's regeneration, the
	// slow one computes them itself.
	checked, err := CheckSieveRoot(context.Background(), sres.Header, sres.Root, 0)
	require.NoError(t, err)
	var f, g memFile
	res, err = Range(context.Background(), &f, p, RangeOptions{Sieve: checked})
	require.NoError(t, err)
	_, err = Range(context.Background(), &g, p, RangeOptions{slow: true})
	require.NoError(t, err)
	return f.b, g.b, res
}

func TestFastPathsWriteTheSameBytes(t *testing.T) {
	// The two-lane search and the rule masks change how numbers are
	// searched and skipped, never what is written: the same bytes as the plain path,
	// for every map, with and without joins and rules, below and across
	// 2^64.
	for _, c := range []struct {
		m     cert.Map
		k     int
		joins bool
		lo    *big.Int
		n     int64
		e     int
	}{
		{cert.Collatz, 16, true, pow2(60), 1 << 21, 0},
		{cert.Collatz, 14, false, big.NewInt(1), 1 << 19, 16},
		{cert.Collatz, 12, true, new(big.Int).Sub(pow2(64), big.NewInt(1<<17+3)), 1 << 18, 14},
		{cert.Map{A: 3, B: -1}, 14, true, big.NewInt(2), 1 << 19, 0},
		{cert.Map{A: 5, B: 1}, 12, true, pow2(40), 1 << 14, 0},
		{cert.Map{A: 3, B: 5}, 12, false, pow2(50), 1 << 17, 0},
		{cert.Collatz, 18, true, new(big.Int).Add(pow2(100), big.NewInt(5)), 1 << 19, 0},
		{cert.Collatz, 22, true, pow2(61), 1 << 23, 0}, // joins with r - 1 only (k > ExhaustiveJoins)
	} {
		for _, rules := range []bool{false, true} {
			hi := new(big.Int).Add(c.lo, big.NewInt(c.n))
			fast, slow, _ := rangeBoth(t, c.m, c.k, c.joins, rules, c.lo, hi, c.e)
			require.True(t, bytes.Equal(fast, slow), "%v k = %d joins %v rules %v from %v", c.m, c.k, c.joins, rules, c.lo)
		}
	}
}

// plainSummary is what a range over [lo, hi) must state, worked out
// number by number with math/big from the definitions alone: a number at
// most N0 is iterated (small); above, its residue mod 2^k either closes at
// some t <= k (sieve, stopping time t), or is a survivor, joined when a
// smaller residue, closing or not, has the same odd steps and value after
// k steps (every residue compared), or fits the first predecessor rule n = M*q + c,
// n >= c, or is searched. Stopping times come from plain iteration with
// the cap; a number that does not drop is counted as cycle or undecided.
func plainSummary(m cert.Map, k int, joins bool, n0 *big.Int, rules []cert.Rule, capSteps int, lo, hi *big.Int) (counts [5]int64, ruled []int64, sum *big.Int, max uint32, at *big.Int, records []cert.Point) {
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	step := func(x *big.Int) bool {
		if x.Bit(0) == 1 {
			x.Mul(x, a).Add(x, b).Rsh(x, 1)
			return true
		}
		x.Rsh(x, 1)
		return false
	}
	type state struct {
		s int
		v string
	}
	closesAt := make([]int, 1<<k) // 0: survivor
	first := map[state]int{}
	joined := make([]bool, 1<<k)
	for r := range 1 << k {
		x, s := big.NewInt(int64(r)), 0
		for t := 1; t <= k; t++ {
			if step(x) {
				s++
			}
			// a^s < 2^t
			if closesAt[r] == 0 && new(big.Int).Exp(a, big.NewInt(int64(s)), nil).Cmp(new(big.Int).Lsh(big.NewInt(1), uint(t))) < 0 {
				closesAt[r] = t
			}
		}
		key := state{s, x.String()}
		if _, ok := first[key]; ok {
			joined[r] = closesAt[r] == 0
		} else {
			first[key] = r
		}
	}
	ruled = make([]int64, len(rules))
	sum = new(big.Int)
	var best uint32
	mod := new(big.Int)
	for n := new(big.Int).Set(lo); n.Cmp(hi) < 0; n.Add(n, big.NewInt(1)) {
		r := int(mod.Mod(n, big.NewInt(1<<k)).Int64())
		kind := 2 // search
		if n.Cmp(n0) <= 0 {
			kind = 3 // small
		} else if closesAt[r] > 0 {
			kind = 0 // sieve
		} else if joins && joined[r] {
			counts[1]++
			continue
		} else if i := ruleOf(rules, n); i >= 0 {
			ruled[i]++
			continue
		}
		x := new(big.Int).Set(n)
		var sigma uint32
		for i := 1; i <= capSteps; i++ {
			step(x)
			if x.Cmp(n) < 0 {
				sigma = uint32(i)
				break
			}
		}
		if sigma == 0 {
			counts[4]++
			continue
		}
		counts[kind]++
		sum.Add(sum, big.NewInt(int64(sigma)))
		if sigma > max {
			max, at = sigma, new(big.Int).Set(n)
		}
		if sigma > best {
			best = sigma
			records = append(records, cert.Point{N: new(big.Int).Set(n), Sigma: sigma})
		}
	}
	return
}

func ruleOf(rules []cert.Rule, n *big.Int) int {
	for i, rule := range rules {
		c := new(big.Int).SetUint64(rule.C)
		if n.Cmp(c) >= 0 && new(big.Int).Mod(n, new(big.Int).SetUint64(rule.M)).Cmp(new(big.Int).Mod(c, new(big.Int).SetUint64(rule.M))) == 0 {
			return i
		}
	}
	return -1
}

// FuzzRangeAgainstPlain compares the totals of a range certificate (the
// sums of its block summaries) with plainSummary, for 3n+1, 3n-1 and
// 5n+1, sieves with and without joins, with and without rules, from near
// 1 to beyond 2^64 and 2^128.
func FuzzRangeAgainstPlain(f *testing.F) {
	f.Add(uint8(0), uint8(10), uint8(60), uint64(12345), uint16(4000), true, true)
	f.Add(uint8(1), uint8(8), uint8(0), uint64(2), uint16(3000), true, false)
	f.Add(uint8(2), uint8(9), uint8(40), uint64(7), uint16(1000), false, true)
	f.Add(uint8(0), uint8(12), uint8(64), uint64(1<<64-1500), uint16(3000), true, true)
	f.Add(uint8(0), uint8(11), uint8(130), uint64(99), uint16(800), false, true)
	f.Add(uint8(0), uint8(6), uint8(0), uint64(1), uint16(5000), true, true)
	maps := []cert.Map{cert.Collatz, {A: 3, B: -1}, {A: 5, B: 1}}
	f.Fuzz(func(t *testing.T, mi, k8, e uint8, off uint64, width uint16, joins, rules bool) {
		m, k := maps[int(mi)%len(maps)], 6+int(k8)%9
		lo := new(big.Int).Lsh(big.NewInt(1), uint(e%140))
		lo.Add(lo, new(big.Int).SetUint64(off))
		hi := new(big.Int).Add(lo, big.NewInt(1+int64(width)%6000))
		const capSteps = 400
		var sf memFile
		sres, err := Sieve(context.Background(), &sf, SieveParams{Map: m, K: k, J: k, Joins: joins}, Options{})
		require.NoError(t, err)
		p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: lo, Hi: hi, Cap: capSteps}
		if rules {
			p.Rules = AutoRules(m)
		}
		var g memFile
		res, err := Range(context.Background(), &g, p, RangeOptions{})
		if err != nil {
			t.Skip(err) // e.g. more undecided numbers than a block may list
		}
		r, err := newRules(m, k, k)
		require.NoError(t, err)
		useRules := p.Rules
		counts, ruled, sum, max, at, records := plainSummary(m, k, joins, r.smallBound(), useRules, capSteps, lo, hi)
		tot := res.Header.Totals
		require.Equal(t, counts[:4], []int64{tot.Sieve.Int64(), tot.Join.Int64(), tot.Search.Int64(), tot.Small.Int64()}, "sieve, join, search, small")
		require.Equal(t, counts[4], tot.Cycle.Int64()+tot.Undecided.Int64(), "cycle and undecided")
		for i := range ruled {
			require.Equal(t, ruled[i], tot.Rules[i].Int64(), "rule %d", i)
		}
		require.Zero(t, sum.Cmp(tot.SigmaSum), "sum of stopping times")
		require.Equal(t, max, tot.MaxSigma)
		if max > 0 {
			require.Zero(t, at.Cmp(tot.MaxAt))
		}
		require.Len(t, tot.Records, len(records))
		for i := range records {
			require.Zero(t, records[i].N.Cmp(tot.Records[i].N))
			require.Equal(t, records[i].Sigma, tot.Records[i].Sigma)
		}
	})
}
