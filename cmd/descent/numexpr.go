package main

import (
	"fmt"
	"math/big"
	"strings"
)

// maxExponent bounds b in a^b, so that a typo cannot ask for a number of
// millions of digits.
const maxExponent = 4096

// parseNumber reads a positive integer written in decimal or as a sum of
// products of powers: 1000000, 2^40, 5*2^60, 2^60+2^35, 3*2^53-1.
func parseNumber(s string) (*big.Int, error) {
	t := strings.ReplaceAll(s, " ", "")
	if t == "" {
		return nil, fmt.Errorf("empty number")
	}
	total := new(big.Int)
	sign := 1
	for len(t) > 0 {
		end := strings.IndexAny(t, "+-")
		if end == 0 {
			return nil, fmt.Errorf("%s: a term is missing", s)
		}
		term := t
		if end > 0 {
			term = t[:end]
		}
		v, err := parseTerm(term)
		if err != nil {
			return nil, fmt.Errorf("%s: %v", s, err)
		}
		if sign > 0 {
			total.Add(total, v)
		} else {
			total.Sub(total, v)
		}
		if end < 0 {
			break
		}
		sign = 1
		if t[end] == '-' {
			sign = -1
		}
		t = t[end+1:]
		if t == "" {
			return nil, fmt.Errorf("%s: a term is missing at the end", s)
		}
	}
	if total.Sign() <= 0 {
		return nil, fmt.Errorf("%s: want a positive number", s)
	}
	return total, nil
}

func parseTerm(term string) (*big.Int, error) {
	v := big.NewInt(1)
	for _, factor := range strings.Split(term, "*") {
		base, exp, hasExp := strings.Cut(factor, "^")
		b, ok := new(big.Int).SetString(base, 10)
		if !ok || b.Sign() < 0 || strings.HasPrefix(base, "+") {
			return nil, fmt.Errorf("%q is not a number: write decimals, or forms like 2^40, 5*2^60, 2^60+2^35", base)
		}
		if hasExp {
			e, ok := new(big.Int).SetString(exp, 10)
			if !ok || e.Sign() < 0 || e.Cmp(big.NewInt(maxExponent)) > 0 || strings.HasPrefix(exp, "+") {
				return nil, fmt.Errorf("the exponent %q: want 0 to %d", exp, maxExponent)
			}
			b.Exp(b, e, nil)
		}
		v.Mul(v, b)
	}
	return v, nil
}
