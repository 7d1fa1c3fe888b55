package main

import (
	"math/big"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

// Predecessor rules in range certificates: the share they justify, the
// checker's proof of each rule, and forged rules.

func emitRuleRange(t *testing.T, from, to string, extra ...string) (sieve string, b []byte) {
	t.Helper()
	dir := t.TempDir()
	sieve = filepath.Join(dir, "sieve.dcert")
	good := filepath.Join(dir, "range.dcert")
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "12", "-o", sieve},
		append([]string{"emit", "range", "-sieve", sieve, "-from", from, "-to", to, "-block", "16", "-rules", "auto", "-o", good}, extra...),
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, stderr)
	}
	b, err := os.ReadFile(good)
	require.NoError(t, err)
	return sieve, b
}

func TestRulesShareOfClasses2458Mod9(t *testing.T) {
	// Eric Roosendaal, "On the 3x+1 problem", technical page: skipping the
	// classes 2, 4, 5 and 8 mod 9 removes a further 44.4% of the numbers
	// to search. The rules 3q+2 <- 2q+1 and 9q+4 <- 8q+3 cover exactly
	// those classes; measured here over the survivor classes of a real run.
	sieve, b := emitRuleRange(t, "2^40", "2^40+2^22")
	code, rep := checkRangeJSON(t, b, sieve)
	require.Equal(t, exitOK, code, "%v", rep)
	counts := rep["counts"].(map[string]any)
	rules := counts["rules"].([]any)
	require.GreaterOrEqual(t, len(rules), 2)
	var ruled, first2 float64
	for i, r := range rules {
		m := r.(map[string]any)
		n := m["numbers"].(float64)
		ruled += n
		if i < 2 {
			first2 += n
		}
		if i == 0 {
			require.Equal(t, "3*q+2", m["class"])
			require.Equal(t, "2*q+1", m["predecessor"])
		}
		if i == 1 {
			require.Equal(t, "9*q+4", m["class"])
			require.Equal(t, "8*q+3", m["predecessor"])
		}
	}
	survivorNumbers := ruled + counts["search"].(float64) + counts["cycle"].(float64) + counts["undecided"].(float64)
	share := first2 / survivorNumbers
	require.InDelta(t, 0.444, share, 0.002, "classes 2, 4, 5, 8 mod 9: %.4f of the survivor-class numbers", share)
	t.Logf("2, 4, 5, 8 mod 9: %.2f%% of %v survivor-class numbers; all %d rules: %.2f%%", 100*share, survivorNumbers, len(rules), 100*ruled/survivorNumbers)
}

func TestRuleJustifiedNumbersReachTheirClass(t *testing.T) {
	// Against math/big: for every rule of the certificate and several q,
	// the predecessor is smaller and reaches n in exactly the stated steps.
	_, b := emitRuleRange(t, "1", "2^20")
	c := openRange(t, b)
	require.NotEmpty(t, c.h.Rules)
	for _, r := range c.h.Rules {
		for _, q := range []int64{0, 1, 2, 3, 1000, 1 << 40} {
			n := new(big.Int).Add(new(big.Int).Mul(new(big.Int).SetUint64(r.M), big.NewInt(q)), new(big.Int).SetUint64(r.C))
			m := new(big.Int).Add(new(big.Int).Mul(new(big.Int).SetUint64(r.Mp), big.NewInt(q)), new(big.Int).SetUint64(r.Cp))
			require.Negative(t, m.Cmp(n), "%v, q = %d", r, q)
			x := new(big.Int).Set(m)
			for range r.Steps {
				if x.Bit(0) == 1 {
					x.Mul(x, big.NewInt(3)).Add(x, big.NewInt(1))
				}
				x.Rsh(x, 1)
			}
			require.Zero(t, x.Cmp(n), "%v, q = %d: T^%d(%v) = %v", r, q, r.Steps, m, x)
		}
	}
}

func TestForgedRulesAreRejected(t *testing.T) {
	sieve, b := emitRuleRange(t, "1", "2^18")
	forgeries := []struct {
		name string
		rule cert.Rule
	}{
		// 9q+4 <- 8q+3 holds; from 4q+3 the path is 6q+5, then 9q+8,
		// whose parity depends on q: the rule fits some q only.
		{"a rule that holds for some q only", cert.Rule{M: 9, C: 4, Mp: 4, Cp: 3, Steps: 3}},
		{"a rule whose steps end elsewhere", cert.Rule{M: 9, C: 4, Mp: 8, Cp: 3, Steps: 2}},
		{"a predecessor larger for large q", cert.Rule{M: 3, C: 5, Mp: 4, Cp: 3, Steps: 1}},
		{"a predecessor not smaller at q = 0", cert.Rule{M: 1, C: 1, Mp: 1, Cp: 2, Steps: 1}},
		{"a predecessor zero", cert.Rule{M: 3, C: 2, Mp: 2, Cp: 0, Steps: 1}},
	}
	for _, f := range forgeries {
		t.Run(f.name, func(t *testing.T) {
			require.Error(t, f.rule.Prove(cert.Collatz), "package cert must refuse it too")
			c := openRange(t, b)
			c.h.Rules[0] = f.rule
			code, rep := checkRangeJSON(t, c.seal(t), sieve)
			require.Equal(t, exitInvalid, code, "%v", rep)
			require.Equal(t, "rule", rep["reason"], "%v", rep["error"])
		})
	}
	t.Run("a true rule that was not used", func(t *testing.T) {
		// Swapping in another true rule keeps every rule proven, but the
		// blocks' counts no longer match the numbers it covers.
		c := openRange(t, b)
		c.h.Rules[0] = cert.Rule{M: 9, C: 8, Mp: 4, Cp: 3, Steps: 2}
		require.NoError(t, c.h.Rules[0].Prove(cert.Collatz))
		code, rep := checkRangeJSON(t, c.seal(t), sieve)
		require.Equal(t, exitInvalid, code, "%v", rep)
		require.Equal(t, "block", rep["reason"], "%v", rep["error"])
	})
	t.Run("a rule count moved to the search", func(t *testing.T) {
		c := openRange(t, b)
		blk := c.blocks[1]
		blk.Rules[0].Sub(blk.Rules[0], big.NewInt(1))
		blk.Search.Add(blk.Search, big.NewInt(1))
		c.h.Totals.Rules[0].Sub(c.h.Totals.Rules[0], big.NewInt(1))
		c.h.Totals.Search.Add(c.h.Totals.Search, big.NewInt(1))
		code, rep := checkRangeJSON(t, c.seal(t), sieve)
		require.Equal(t, exitInvalid, code, "%v", rep)
		require.Equal(t, "block", rep["reason"], "%v", rep["error"])
	})
	t.Run("a block without its rule counts", func(t *testing.T) {
		c := openRange(t, b)
		c.blocks[0].Rules = c.blocks[0].Rules[:1]
		code, rep := checkRangeJSON(t, c.seal(t), sieve)
		require.Equal(t, exitUsage, code, "%v", rep)
		require.Equal(t, "malformed", rep["reason"])
	})
}

func TestRuleClaimExceptsWhatMeetsAnUndecidedOrbit(t *testing.T) {
	// With a cap of 17 steps, 27, 31, 63 and 111 stay undecided; 47 rests
	// on 31 by 3q+2 <- 2q+1, and 71, 91, 103 rest on 47 in turn. 103's own
	// orbit never reaches an undecided number, so the claim must except
	// every number whose orbit meets an undecided one's: it says such a
	// number reaches what an undecided number reaches.
	dir := t.TempDir()
	sieve, rng := filepath.Join(dir, "s.dcert"), filepath.Join(dir, "r.dcert")
	for _, args := range [][]string{{"emit", "sieve", "-k", "16", "-o", sieve},
		{"emit", "range", "-sieve", sieve, "-from", "1", "-to", "128", "-cap", "17", "-rules", "auto", "-o", rng}} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, stderr)
	}
	code, out, stderr := runCLI("show", rng)
	require.Equal(t, exitOK, code, stderr)
	text := strings.Join(strings.Fields(out), " ")
	require.Contains(t, text, "every n < 128 reaches 1, or what one of the 4 undecided numbers reaches")
	require.Contains(t, text, "Two numbers whose orbits share a value reach the same cycle, or neither reaches one")
	require.Contains(t, text, "and a number resting on a rule with its predecessor")
}
