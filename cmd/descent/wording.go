package main

import (
	"fmt"
	"math/big"
	"strings"

	"descent/cert"
)

// The small pieces every printed claim is made of, in one place so that
// show, check and emit say the same thing the same way.

// integer is what a count may be: a machine integer or a decimal string
// (Num) for counts beyond 64 bits.
type integer interface {
	~int | ~int64 | ~uint32 | ~uint64 | ~string
}

// count writes n with its noun in the number n takes: "0 numbers",
// "1 number", "2 numbers".
func count[N integer](n N, one, many string) string {
	return fmt.Sprint(n) + " " + agree(n, one, many)
}

// agree picks the form of a word that agrees with n: agree(n, "reaches",
// "reach").
func agree[N integer](n N, one, many string) string {
	if fmt.Sprint(n) == "1" {
		return one
	}
	return many
}

// list joins words as prose: "5", "5 and 17", "1, 5 and 17".
func list(words []string, conj string) string {
	switch len(words) {
	case 0:
		return ""
	case 1:
		return words[0]
	}
	return strings.Join(words[:len(words)-1], ", ") + " " + conj + " " + words[len(words)-1]
}

// alternatives joins the alternatives of a claim, each of which may be a
// list itself: "A, or B, or C"; a comma keeps "1, 13 and 17, or what ..."
// from reading as one list.
func alternatives(alts []string) string {
	return strings.Join(alts, ", or ")
}

// firstSteps is "the first step" or "the first 12 steps".
func firstSteps(n int) string {
	if n == 1 {
		return "the first step"
	}
	return fmt.Sprintf("the first %d steps", n)
}

// maxFormTerms bounds the terms of a compact form: beyond, the decimal is
// clearer.
const maxFormTerms = 3

// powerForm writes x as a short sum of powers of two, the way ranges are
// written on the command line (2^20, 5*2^60, 2^60+2^35, 2^64-1), or returns
// "" when x is small or has no form of at most maxFormTerms terms. A
// certificate stores only the numbers; this recovers a readable form.
func powerForm(x *big.Int) string {
	if x.Sign() <= 0 || x.BitLen() <= 16 {
		return ""
	}
	best := ""
	consider := func(s string, terms int) {
		if terms <= maxFormTerms && (best == "" || len(s) < len(best)) {
			best = s
		}
	}
	if ts := naf(x); len(ts) <= maxFormTerms {
		consider(formatTerms(1, ts), len(ts))
	}
	// A leading small odd multiple c*2^e (3 <= c <= 15, as in 5*2^60 or
	// 3*2^53-1), then the rest in signed powers of two below 2^e. Larger
	// multipliers are rarely how a bound is written: 17*2^16 is 2^20+2^16.
	for e := x.BitLen() - 2; e >= 1; e-- {
		base := new(big.Int).Rsh(x, uint(e))
		for _, c := range []*big.Int{base, new(big.Int).Add(base, big.NewInt(1))} {
			if c.Bit(0) == 0 || c.Cmp(big.NewInt(3)) < 0 || c.Cmp(big.NewInt(15)) > 0 {
				continue
			}
			rest := new(big.Int).Sub(x, new(big.Int).Lsh(c, uint(e)))
			sign, abs := 1, new(big.Int).Abs(rest)
			if rest.Sign() < 0 {
				sign = -1
			}
			ts := naf(abs)
			if len(ts) > 0 && ts[0].exp >= e {
				continue
			}
			for i := range ts {
				ts[i].sign *= sign
			}
			consider(fmt.Sprintf("%v*2^%d", c, e)+formatTerms(0, ts), 1+len(ts))
		}
	}
	return best
}

type signedPow struct{ sign, exp int }

// naf is the non-adjacent form of x: signed powers of two, fewest terms,
// largest first.
func naf(x *big.Int) []signedPow {
	var out []signedPow
	v := new(big.Int).Set(x)
	for e := 0; v.Sign() != 0; e++ {
		if v.Bit(0) == 1 {
			d := 2 - int(new(big.Int).And(v, big.NewInt(3)).Int64()) // +1 or -1
			out = append(out, signedPow{d, e})
			v.Sub(v, big.NewInt(int64(d)))
		}
		v.Rsh(v, 1)
	}
	for i, j := 0, len(out)-1; i < j; i, j = i+1, j-1 {
		out[i], out[j] = out[j], out[i]
	}
	return out
}

// formatTerms writes signed powers of two; lead = 1 omits the sign of a
// positive first term.
func formatTerms(lead int, ts []signedPow) string {
	var b strings.Builder
	for i, t := range ts {
		switch {
		case t.sign < 0:
			b.WriteString("-")
		case i > 0 || lead == 0:
			b.WriteString("+")
		}
		switch t.exp {
		case 0:
			b.WriteString("1")
		case 1:
			b.WriteString("2")
		default:
			fmt.Fprintf(&b, "2^%d", t.exp)
		}
	}
	return b.String()
}

// numText writes a number as a decimal with its compact form beside it:
// "16777216 (2^24)".
func numText(dec string) string {
	x, ok := new(big.Int).SetString(dec, 10)
	if !ok {
		return dec
	}
	if f := powerForm(x); f != "" {
		return dec + " (" + f + ")"
	}
	return dec
}

// rangeText writes [lo, hi) as written and in decimals:
// "[2^20, 2^20+2^16) = [1048576, 1114112)".
func rangeText(lo, hi string) string {
	dec := "[" + lo + ", " + hi + ")"
	form := func(s string) string {
		if x, ok := new(big.Int).SetString(s, 10); ok {
			if f := powerForm(x); f != "" {
				return f
			}
		}
		return s
	}
	if w := "[" + form(lo) + ", " + form(hi) + ")"; w != dec {
		return w + " = " + dec
	}
	return dec
}

// question names what a claim for the map an+b is not a proof of: the map's
// own open question.
func question(mapName string) string {
	if mapName == "3n+1" {
		return "the 3n+1 (Collatz) conjecture, that every positive integer reaches 1, or of any other statement about all integers"
	}
	return fmt.Sprintf("any statement about all positive integers under %s, such as whether every orbit ends in a cycle "+
		"or which cycles there are", mapName)
}

// stepsLabel names the step convention of every stopping time printed.
func stepsLabel(mapName string) string {
	return fmt.Sprintf("steps of T; standard steps count %s and n/2 as separate steps", mapName)
}

// maxStandardWork bounds the steps spent on converting stopping times to
// standard steps for one output; a hostile header could otherwise ask for
// 2^16 records of 2^24 steps each.
const maxStandardWork = 1 << 22

// standard converts stopping times in steps of T to standard steps, where
// an odd step of T, (an+b)/2, counts as two (an+b, then a halving). Since
// an+b > n >= the start on every such step, the standard orbit cannot drop
// in between, so the standard stopping time is t plus the odd steps among
// the first t steps of T. Exact, with math/big; it stops converting once
// the work bound is spent.
type standard struct {
	a, b *big.Int
	left int64
}

func newStandard(mapName string) *standard {
	m, err := cert.ParseMap(mapName)
	if err != nil {
		return nil
	}
	return &standard{a: big.NewInt(int64(m.A)), b: big.NewInt(int64(m.B)), left: maxStandardWork}
}

// steps returns the standard stopping time of n, whose stopping time is t
// steps of T, or 0 when it is not worked out.
func (s *standard) steps(n string, t uint32) uint64 {
	x, ok := new(big.Int).SetString(n, 10)
	if s == nil || !ok || int64(t) > s.left {
		return 0
	}
	s.left -= int64(t)
	odd := uint64(0)
	for range t {
		if x.Bit(0) == 0 {
			x.Rsh(x, 1)
			continue
		}
		odd++
		x.Mul(x, s.a).Add(x, s.b).Rsh(x, 1)
	}
	return uint64(t) + odd
}
