package check

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/check/kernel"
)

// The walk of a class through the rules finds, at each member, the first
// rule that division finds (common practice, no source: the definition of
// a rule's numbers, n = M*q + C), also for moduli near 2^64 where n mod M
// plus 2^k mod M wraps around.
func TestRuleWalkAgreesWithDivision(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	hits := 0
	for trial := range 200 {
		var rules []kernel.Rule
		for range 1 + rng.IntN(16) {
			m := uint64(2 + rng.IntN(200))
			if trial%4 == 0 {
				m = ^uint64(0) - rng.Uint64N(1<<20)
			}
			rules = append(rules, kernel.Rule{M: m, C: rng.Uint64N(3 * m / 2)})
		}
		k := 1 + rng.IntN(40)
		s := &searcher{k: k, h: &kernel.RangeHeader{Rules: rules}}
		n := rng.Uint64N(1 << 62)
		if trial%4 == 0 { // a hit with a modulus near 2^64
			rules[0].C = n + uint64(rng.IntN(300))<<k
		}
		w := s.ruleWalk(n)
		for j := range 300 {
			num := n + uint64(j)<<k
			want := -1
			for i, r := range rules {
				if num >= r.C && (num-r.C)%r.M == 0 {
					want = i
					break
				}
			}
			require.Equal(t, want, w.next(num), "trial %d, member %d", trial, j)
			if want >= 0 {
				hits++
			}
		}
	}
	require.Greater(t, hits, 1000, "too few members rest on a rule for the test to mean much")
}
