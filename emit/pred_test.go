package emit

import (
	"math/big"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func TestAutoRulesFor3nPlus1(t *testing.T) {
	// The two classic rules (Eric Roosendaal, "On the 3x+1 problem",
	// technical page: skip the classes 2, 4, 5, 8 mod 9) come first.
	rules := AutoRules(cert.Collatz)
	require.GreaterOrEqual(t, len(rules), 2)
	require.Equal(t, cert.Rule{M: 3, C: 2, Mp: 2, Cp: 1, Steps: 1}, rules[0])
	require.Equal(t, cert.Rule{M: 9, C: 4, Mp: 8, Cp: 3, Steps: 3}, rules[1])
	for _, m := range []cert.Map{cert.Collatz, {A: 3, B: -1}, {A: 5, B: 1}, {A: 3, B: 5}} {
		for _, r := range AutoRules(m) {
			require.NoError(t, r.Prove(m), "%v: %v", m, r)
		}
	}
}

func TestProveRefusesFalseRules(t *testing.T) {
	for _, r := range []cert.Rule{
		{M: 9, C: 4, Mp: 4, Cp: 3, Steps: 3},  // a parity that depends on q
		{M: 9, C: 4, Mp: 8, Cp: 3, Steps: 2},  // ends at 18q+8
		{M: 3, C: 2, Mp: 4, Cp: 1, Steps: 1},  // M' > M
		{M: 3, C: 2, Mp: 2, Cp: 2, Steps: 1},  // c' >= c
		{M: 3, C: 2, Mp: 2, Cp: 1, Steps: 0},  // no steps
		{M: 3, C: 2, Mp: 2, Cp: 1, Steps: 65}, // too many
	} {
		require.Error(t, r.Prove(cert.Collatz), "%v", r)
	}
	_, err := Range(t.Context(), discard{}, RangeParams{Sieve: &cert.SieveHeader{Map: cert.Collatz, K: 8, J: 8, Cap: 100},
		Lo: big.NewInt(1), Hi: big.NewInt(100), Rules: []cert.Rule{{M: 9, C: 4, Mp: 8, Cp: 3, Steps: 2}}}, RangeOptions{})
	require.ErrorContains(t, err, "not 9*q + 4")
}
