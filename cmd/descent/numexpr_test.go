package main

import (
	"math/big"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestParseNumber(t *testing.T) {
	p := func(e uint) *big.Int { return new(big.Int).Lsh(big.NewInt(1), e) }
	for s, want := range map[string]*big.Int{
		"1000000":    big.NewInt(1000000),
		"2^40":       p(40),
		"5*2^60":     new(big.Int).Mul(big.NewInt(5), p(60)),
		"2^60+2^35":  new(big.Int).Add(p(60), p(35)),
		"3*2^53 - 1": new(big.Int).Sub(new(big.Int).Mul(big.NewInt(3), p(53)), big.NewInt(1)),
		"10^20":      new(big.Int).Exp(big.NewInt(10), big.NewInt(20), nil),
		"2^128+2^64": new(big.Int).Add(p(128), p(64)),
	} {
		got, err := parseNumber(s)
		require.NoError(t, err, s)
		require.Zero(t, want.Cmp(got), "%s = %v, not %v", s, want, got)
	}
	for _, s := range []string{"", "0", "2^", "^3", "2^^3", "x", "1-1", "2-3", "+5", "2^5000", "2^-1", "1+", "--1", "3**2"} {
		_, err := parseNumber(s)
		require.Error(t, err, s)
	}
}
