package check

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/check/kernel"
)

// The rule table, stepped through as the search steps through a class's
// members n, n + 2^k, ..., finds at each member the first rule that
// division finds (common practice, no source: the definition of a rule's
// numbers, n = M*q + C).
func TestRuleTableAgreesWithDivision(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	hits, tables := 0, 0
	for trial := range 300 {
		var rules []kernel.Rule
		for range 1 + rng.IntN(4) {
			m := uint64(2 + rng.IntN(300))
			if trial%3 == 0 { // powers of 3, as 3n+1's rules have
				m = []uint64{3, 9, 27, 81, 243}[rng.IntN(5)]
			}
			rules = append(rules, kernel.Rule{M: m, C: rng.Uint64N(3 * m / 2)})
		}
		k := 1 + rng.IntN(40)
		s := &searcher{k: k, h: &kernel.RangeHeader{Rules: rules}, rules: newRuleTable(rules, k)}
		if s.rules == nil {
			continue
		}
		tables++
		n := rng.Uint64N(1 << 62)
		if trial%2 == 0 {
			n = rng.Uint64N(600) // below some C
		}
		at := n % uint64(len(s.rules.first))
		for j := range 300 {
			num := n + uint64(j)<<k
			want := -1
			for i, r := range rules {
				if num >= r.C && (num-r.C)%r.M == 0 {
					want = i
					break
				}
			}
			got := s.ruleFor(num)
			if num >= s.rules.maxC {
				got = int(s.rules.first[at])
			}
			require.Equal(t, want, got, "trial %d, member %d", trial, j)
			if want >= 0 {
				hits++
			}
			at = (at + s.rules.step) % uint64(len(s.rules.first))
		}
	}
	require.Greater(t, tables, 100)
	require.Greater(t, hits, 1000, "too few members rest on a rule for the test to mean much")
}
