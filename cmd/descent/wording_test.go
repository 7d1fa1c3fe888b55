package main

import (
	"fmt"
	"math/big"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestCountTakesTheNumber(t *testing.T) {
	for _, c := range []struct {
		n    any
		want string
	}{
		{0, "0 numbers"}, {1, "1 number"}, {2, "2 numbers"},
		{uint64(1), "1 number"}, {uint32(2), "2 numbers"},
		{Num("0"), "0 numbers"}, {Num("1"), "1 number"}, {Num("100000000000000000000"), "100000000000000000000 numbers"},
	} {
		var got string
		switch n := c.n.(type) {
		case int:
			got = count(n, "number", "numbers")
		case uint64:
			got = count(n, "number", "numbers")
		case uint32:
			got = count(n, "number", "numbers")
		case Num:
			got = count(n, "number", "numbers")
		}
		require.Equal(t, c.want, got)
	}
	require.Equal(t, "reaches", agree(1, "reaches", "reach"))
	require.Equal(t, "reach", agree(0, "reaches", "reach"))
	require.Equal(t, "5, 13 and 17", list([]string{"5", "13", "17"}, "and"))
}

func TestPowerForm(t *testing.T) {
	p := func(e uint) *big.Int { return new(big.Int).Lsh(big.NewInt(1), e) }
	add := func(xs ...*big.Int) *big.Int {
		s := new(big.Int)
		for _, x := range xs {
			s.Add(s, x)
		}
		return s
	}
	for _, c := range []struct {
		x    *big.Int
		want string
	}{
		{p(20), "2^20"},
		{add(p(20), p(16)), "2^20+2^16"},
		{add(p(60), p(35)), "2^60+2^35"},
		{new(big.Int).Mul(big.NewInt(5), p(60)), "5*2^60"},
		{add(new(big.Int).Mul(big.NewInt(3), p(53)), big.NewInt(-1)), "3*2^53-1"},
		{add(p(64), big.NewInt(-1)), "2^64-1"},
		{add(p(100), p(14)), "2^100+2^14"},
		{big.NewInt(1000), ""},    // small: the decimal is clear
		{big.NewInt(65535), ""},   // 16 bits
		{big.NewInt(1000000), ""}, // no short form
		{big.NewInt(123456789), ""},
	} {
		require.Equal(t, c.want, powerForm(c.x), "%v", c.x)
	}
	// Every form found reads back as its number.
	for e := uint(17); e < 140; e += 7 {
		for _, d := range []int64{-3, -1, 0, 1, 5, 1 << 10} {
			for _, c := range []int64{1, 3, 5, 7, 15, 17} {
				x := add(new(big.Int).Mul(big.NewInt(c), p(e)), big.NewInt(d))
				f := powerForm(x)
				if f == "" {
					continue
				}
				y, err := parseNumber(f)
				require.NoError(t, err, f)
				require.Equal(t, 0, x.Cmp(y), "%v written %s", x, f)
			}
		}
	}
	require.Equal(t, "[2^20, 2^20+2^16) = [1048576, 1114112)", rangeText("1048576", "1114112"))
	require.Equal(t, "[2, 1000)", rangeText("2", "1000"))
	require.Equal(t, "16777216 (2^24)", numText("16777216"))
}

// Words that disagree with the count before them.
var disagreeRE = []*regexp.Regexp{
	regexp.MustCompile(`\b1 (numbers|steps|classes|closing classes|survivors|exceptions|blocks|cycles|predecessor rules|small ones|survivorclasses)\b`),
	regexp.MustCompile(`\b[02] (closing class|survivorclass|predecessor rule|small one|number|step|class|survivor|exception|block)\b[^s]`),
	regexp.MustCompile(`\b1 (reach|survive|remain|join|close)\b`),
	regexp.MustCompile(`\b[02] (reaches|survives|remains|joins|closes)\b`),
	regexp.MustCompile(`\b1 of the 2\^\d+ residues survive\b`),
	regexp.MustCompile(`\b[02] of the 2\^\d+ residues survives\b`),
}

// TestWordingAgreesWithCounts puts every count of a claim at 0, 1 and 2
// and reads every sentence made of it.
func TestWordingAgreesWithCounts(t *testing.T) {
	for _, n := range []int{0, 1, 2} {
		s := fmt.Sprint(n)
		one := max(n, 1) // a step budget, cap or rule length is at least 1
		sf := facts{Map: "5n+1", K: one + 1, J: one, Cap: uint32(one), Survivors: uint64(n), Joins: true, Joined: uint64(n) / 2}
		for i := 0; i < n; i++ {
			sf.Closing = append(sf.Closing, closing{Step: i + 1, Classes: uint64(n)})
			sf.Exceptions = append(sf.Exceptions, excFact{N: fmt.Sprint(i + 1), Fate: "descends", Steps: uint32(n)})
		}
		rf := rangeFacts{Map: "5n+1", Lo: "1", Hi: "100", SieveRoot: "00", K: 8, E: 12, Cap: uint32(one),
			Counts: RangeCounts{Sieve: Num(s), Search: Num(s), Small: Num(s), Cycle: Num(s), Undecided: Num(s),
				StoppingTimeSum: Num(s)}}
		for i := 0; i < n; i++ {
			rf.Counts.Rules = append(rf.Counts.Rules, RuleReport{Class: "5*q+3", Predecessor: "2*q+1", Steps: n, Numbers: Num(s)})
			rf.Cycles = append(rf.Cycles, CycleReport{Min: Num(fmt.Sprint(13 + i)), Count: Num(s)})
		}
		if n > 0 {
			rf.Max = &RecordReport{N: "7", StoppingTime: uint32(n), StandardSteps: uint64(n)}
		}
		below := []ExceptionReport{}
		rf.Below = &below
		for _, text := range []string{sf.summary(), sf.sentence(), sf.caveat(), rf.summary(), rf.sentence(), rf.caveat()} {
			text = strings.ReplaceAll(text, "survivor class", "survivorclass") // one noun
			for _, re := range disagreeRE {
				require.Nil(t, re.FindStringIndex(text), "count %d: %q in %q", n, re.FindString(text), text)
			}
		}
	}
}
