package main

import (
	"fmt"
	"math/big"
	"strings"

	"descent/cert"
	"descent/check"
)

// rangeFacts is the claim of a range certificate, from its header (show,
// emit) or from the checker's report (check).
type rangeFacts struct {
	Map, Lo, Hi, SieveRoot string
	K, E                   int
	Cap                    uint32
	Ceiling                int
	Counts                 check.RangeCounts
	Records                []check.RecordReport
	Max                    *check.RecordReport
	Cycles                 []check.CycleReport
}

func num(x fmt.Stringer) check.Num { return check.Num(x.String()) }

func rangeFactsFromHeader(h *cert.RangeHeader) rangeFacts {
	t := &h.Totals
	f := rangeFacts{Map: h.Map.String(), Lo: h.Lo.String(), Hi: h.Hi.String(), SieveRoot: h.SieveRoot.String(), K: h.K, E: h.E, Cap: h.Cap, Ceiling: h.Ceiling,
		Counts: check.RangeCounts{Sieve: num(t.Sieve), Join: num(t.Join), Search: num(t.Search), Small: num(t.Small), Cycle: num(t.Cycle),
			Undecided: num(t.Undecided), StoppingTimeSum: num(t.SigmaSum), Rules: []check.RuleReport{}}}
	for i, r := range h.Rules {
		rr := check.RuleReport{Class: fmt.Sprintf("%d*q+%d", r.M, r.C), Predecessor: fmt.Sprintf("%d*q+%d", r.Mp, r.Cp), Steps: r.Steps, Numbers: "0"}
		if i < len(t.Rules) {
			rr.Numbers = num(t.Rules[i])
		}
		f.Counts.Rules = append(f.Counts.Rules, rr)
	}
	for _, p := range t.Records {
		f.Records = append(f.Records, check.RecordReport{N: num(p.N), StoppingTime: p.Sigma})
	}
	if t.MaxAt != nil {
		f.Max = &check.RecordReport{N: num(t.MaxAt), StoppingTime: t.MaxSigma}
	}
	for _, c := range t.Cycles {
		f.Cycles = append(f.Cycles, check.CycleReport{Min: num(c.Min), Count: num(c.Count)})
	}
	return f
}

func rangeFactsFromReport(r *check.Report) rangeFacts {
	f := rangeFacts{Map: r.Map, Lo: string(r.From), Hi: string(r.To), SieveRoot: r.SieveRoot, K: r.K, E: r.BlockExp, Cap: r.Cap, Ceiling: r.Ceiling,
		Records: r.Records, Max: r.MaxStoppingTime, Cycles: r.Cycles}
	if r.Counts != nil {
		f.Counts = *r.Counts
	}
	return f
}

func (f rangeFacts) cycleList() string {
	var parts []string
	for _, c := range f.Cycles {
		parts = append(parts, string(c.Min))
	}
	return strings.Join(parts, ", ")
}

func (f rangeFacts) onlyOne() bool { return len(f.Cycles) == 1 && f.Cycles[0].Min == "1" }

// summary is the claim in one line.
func (f rangeFacts) summary() string {
	s := fmt.Sprintf("%s over [%s, %s): %s numbers justified by the sieve, %s by search, %s small ones directly",
		f.Map, f.Lo, f.Hi, f.Counts.Sieve, f.Counts.Search, f.Counts.Small)
	if f.Counts.Join != "" && f.Counts.Join != "0" {
		s += fmt.Sprintf(", %s by joins of the sieve", f.Counts.Join)
	}
	if len(f.Counts.Rules) > 0 {
		s += fmt.Sprintf(", %s by %s", f.ruleTotal(), plural(len(f.Counts.Rules), "predecessor rule", "predecessor rules"))
	}
	if len(f.Cycles) > 0 {
		s += fmt.Sprintf("; %s reach a cycle (through %s)", f.Counts.Cycle, f.cycleList())
	}
	s += fmt.Sprintf("; %s undecided", f.Counts.Undecided)
	if f.Max != nil {
		s += fmt.Sprintf("; largest stopping time %d, first at n = %s", f.Max.StoppingTime, f.Max.N)
	}
	return s
}

// sentence is the claim fit to quote.
func (f rangeFacts) sentence() string {
	joins := f.Counts.Join != "" && f.Counts.Join != "0"
	s := fmt.Sprintf("For T(n) = n/2 for even n, (%s)/2 for odd n, every n in [%s, %s) either drops below itself "+
		"(T^i(n) < n for some i; its stopping time is the least such i) or reaches a cycle without dropping, "+
		"or is listed as undecided within %d steps.", f.Map, f.Lo, f.Hi, f.Cap)
	if joins {
		s = fmt.Sprintf("For T(n) = n/2 for even n, (%s)/2 for odd n, every n in [%s, %s) either drops below itself "+
			"(T^i(n) < n for some i; its stopping time is the least such i), or lies in a survivor class the sieve joins to "+
			"a smaller one (so it meets a smaller number after %d steps), or reaches a cycle without dropping, "+
			"or is listed as undecided within %d steps (or on reaching 2^%d).", f.Map, f.Lo, f.Hi, f.K, f.Cap, f.Ceiling)
	}
	if len(f.Cycles) > 0 {
		s += fmt.Sprintf(" The numbers that do not drop reach the cycles whose smallest members are %s.", f.cycleList())
	}
	target := "one of those cycles"
	if f.Map == "3n+1" && (f.onlyOne() || len(f.Cycles) == 0) {
		target = "1"
	}
	if len(f.Counts.Rules) > 0 {
		var rs []string
		for _, r := range f.Counts.Rules {
			rs = append(rs, fmt.Sprintf("n = %s from m = %s in %s", r.Class, r.Predecessor, plural(r.Steps, "step", "steps")))
		}
		s += fmt.Sprintf(" Numbers of survivor classes that fit a predecessor rule (%s, for every q >= 0, "+
			"proven for all q by affine arithmetic) are justified by that smaller m, whose orbit passes through n; "+
			"they are not searched and have no stopping time in the figures.", strings.Join(rs, "; "))
	}
	except := ""
	if f.Counts.Undecided != "0" {
		except = fmt.Sprintf(", except the %s undecided numbers and any number whose orbit reaches one of them", f.Counts.Undecided)
		if len(f.Counts.Rules) > 0 || joins { // a rule or a join rests n on a number whose orbit meets n's
			except = fmt.Sprintf(", except the %s undecided numbers and any number whose orbit meets the orbit of one of them", f.Counts.Undecided)
		}
	}
	// A number that drops reaches whatever the smaller number reaches.
	if f.Lo == "1" || f.Lo == "2" {
		s += fmt.Sprintf(" Hence, by strong induction, every n < %s reaches %s%s.", f.Hi, target, except)
	} else {
		s += fmt.Sprintf(" By strong induction, if every m < %s reaches %s, then so does every n < %s%s; "+
			"a certificate for [1, %s) would show the premise.", f.Lo, target, f.Hi, except, f.Lo)
	}
	return s
}

// ruleTotal adds up the numbers the predecessor rules justified.
func (f rangeFacts) ruleTotal() string {
	t := new(big.Int)
	for _, r := range f.Counts.Rules {
		x, _ := new(big.Int).SetString(string(r.Numbers), 10)
		if x != nil {
			t.Add(t, x)
		}
	}
	return t.String()
}

func (f rangeFacts) caveat() string {
	return fmt.Sprintf("This is a claim about [%s, %s) only, resting on the sieve certificate %s (k = %d), which must be "+
		"checked with it. It says nothing about numbers at or above %s, and is not a proof of the 3n+1 conjecture "+
		"or of any statement about all integers.", f.Lo, f.Hi, f.SieveRoot, f.K, f.Hi)
}
