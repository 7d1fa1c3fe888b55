package main

import (
	"fmt"
	"math/big"
	"strings"

	"descent/cert"
	"descent/check"
	"descent/check/kernel"
)

// rangeFacts is the claim of a range certificate, from its header (show,
// emit) or from the checker's report (check): both go through a
// Report, so that the words are made once from one set of fields.
type rangeFacts struct {
	Map, Lo, Hi, SieveRoot string
	K, E                   int
	Cap                    uint32
	Ceiling                int
	Counts                 RangeCounts
	Records                []RecordReport // over the numbers with a stated stopping time
	Max                    *RecordReport  // the same
	Cycles                 []CycleReport
	// Below is what the numbers below Lo reach, derived by direct
	// iteration when Lo <= 2; nil when not derived.
	Below *[]ExceptionReport
}

func num(x fmt.Stringer) Num { return Num(x.String()) }

func rangeFactsFromHeader(h *cert.RangeHeader) rangeFacts {
	return rangeFactsFromReport(rangeReport(h, cert.Hash{}, nil))
}

// rangeReport is a report of the claim as written in a range header, with
// the undecided numbers read from its blocks: it re-derives nothing of the
// certificate (ModeUnchecked). What 1 reaches, when the range starts
// at 2, is a fact about the map alone and is derived by iteration.
func rangeReport(h *cert.RangeHeader, root cert.Hash, undecided []*big.Int) *Report {
	t := &h.Totals
	r := &Report{Mode: ModeUnchecked, Kind: "range", Root: root.String(), Map: h.Map.String(), SieveRoot: h.SieveRoot.String(),
		From: num(h.Lo), To: num(h.Hi), K: h.K, BlockExp: h.E, Cap: h.Cap, Ceiling: h.Ceiling, Chunks: h.Blocks,
		Counts: &RangeCounts{Sieve: num(t.Sieve), Join: num(t.Join), Search: num(t.Search), Small: num(t.Small), Cycle: num(t.Cycle),
			Undecided: num(t.Undecided), StoppingTimeSum: num(t.SigmaSum), Rules: []RuleReport{}},
		Records: []RecordReport{}, Cycles: []CycleReport{}, Undecided: []Num{},
		Below: belowReport(check.FatesBelow(kernel.Map{A: h.Map.A, B: h.Map.B}, h.Cap, h.Ceiling, h.Lo))}
	for i, x := range h.Rules {
		rr := RuleReport{Class: fmt.Sprintf("%d*q+%d", x.M, x.C), Predecessor: fmt.Sprintf("%d*q+%d", x.Mp, x.Cp), Steps: x.Steps, Numbers: "0"}
		if i < len(t.Rules) {
			rr.Numbers = num(t.Rules[i])
		}
		r.Counts.Rules = append(r.Counts.Rules, rr)
	}
	for _, p := range t.Records {
		r.Records = append(r.Records, RecordReport{N: num(p.N), StoppingTime: p.Sigma})
	}
	if t.MaxAt != nil {
		r.MaxStoppingTime = &RecordReport{N: num(t.MaxAt), StoppingTime: t.MaxSigma}
	}
	for _, c := range t.Cycles {
		r.Cycles = append(r.Cycles, CycleReport{Min: num(c.Min), Count: num(c.Count)})
	}
	for _, n := range undecided {
		r.Undecided = append(r.Undecided, num(n))
	}
	return r
}

func rangeFactsFromReport(r *Report) rangeFacts {
	f := rangeFacts{Map: r.Map, Lo: string(r.From), Hi: string(r.To), SieveRoot: r.SieveRoot, K: r.K, E: r.BlockExp, Cap: r.Cap, Ceiling: r.Ceiling,
		Records: r.Records, Max: r.MaxStoppingTime, Cycles: r.Cycles, Below: r.Below}
	if r.Counts != nil {
		f.Counts = *r.Counts
	}
	return f
}

// addStandardSteps works out the standard steps of the stopping times a
// report states (its maximum and records), within a bound on the work.
func addStandardSteps(r *Report) {
	st := newStandard(r.Map)
	if r.MaxStoppingTime != nil {
		r.MaxStoppingTime.StandardSteps = st.steps(string(r.MaxStoppingTime.N), r.MaxStoppingTime.StoppingTime)
	}
	for i := range r.Records {
		r.Records[i].StandardSteps = st.steps(string(r.Records[i].N), r.Records[i].StoppingTime)
	}
}

func (f rangeFacts) rangeText() string { return rangeText(f.Lo, f.Hi) }

func (f rangeFacts) mapText() string {
	return fmt.Sprintf("T(n) = n/2 for even n, (%s)/2 for odd n", f.Map)
}

func (f rangeFacts) ruleNumbers() *big.Int {
	t := new(big.Int)
	for _, r := range f.Counts.Rules {
		if x, ok := new(big.Int).SetString(string(r.Numbers), 10); ok {
			t.Add(t, x)
		}
	}
	return t
}

// cycleMins are the smallest members of the cycles reached in the range
// without dropping.
func (f rangeFacts) cycleMins() []string {
	var out []string
	for _, c := range f.Cycles {
		out = append(out, string(c.Min))
	}
	return out
}

// cyclesText names cycles by their smallest members.
func cyclesText(mins []string) string {
	if len(mins) == 1 {
		return "the cycle whose smallest member is " + mins[0]
	}
	return "the cycles whose smallest members are " + list(mins, "and")
}

// undecidedDef says what undecided means for this certificate: the fate
// rule of SPEC.md, section 1, with its cap and ceiling.
func (f rangeFacts) undecidedDef() string {
	return fmt.Sprintf("its orbit reaches 2^%d before dropping below it, or neither drops below it nor repeats within %s of T",
		f.Ceiling, count(f.Cap, "step", "steps"))
}

// joins says whether numbers of the range rest on joins of the sieve.
func (f rangeFacts) joins() bool { return f.Counts.Join != "" && f.Counts.Join != "0" }

// stoppingTimeText is a stopping time with its step convention.
func stoppingTimeText(r *RecordReport) string {
	s := count(r.StoppingTime, "step", "steps") + " of T"
	if r.StandardSteps > 0 {
		s += fmt.Sprintf(" (%d standard)", r.StandardSteps)
	}
	return s
}

// summary is the claim in one line.
func (f rangeFacts) summary() string {
	stated := f.Counts.Stated()
	s := fmt.Sprintf("%s over %s: %s with a stated stopping time (%s by the sieve, %s by search, %s iterated directly)",
		f.Map, f.rangeText(), count(stated, "number", "numbers"), f.Counts.Sieve, f.Counts.Search,
		count(f.Counts.Small, "small one", "small ones"))
	if f.joins() {
		s += fmt.Sprintf(", %s resting on joins of the sieve", f.Counts.Join)
	}
	if len(f.Counts.Rules) > 0 {
		s += fmt.Sprintf(", %s resting on %s", f.ruleNumbers(), count(len(f.Counts.Rules), "predecessor rule", "predecessor rules"))
	}
	s += fmt.Sprintf(", %s reaching a cycle without dropping", f.Counts.Cycle)
	if len(f.Cycles) > 0 {
		s += " (" + cyclesText(f.cycleMins()) + ")"
	}
	s += fmt.Sprintf(", %s undecided", f.Counts.Undecided)
	if f.Max != nil {
		s += fmt.Sprintf("; the largest stated stopping time is %s, first at n = %s", stoppingTimeText(f.Max), f.Max.N)
	}
	return s
}

// reaches describes what the numbers below the range reach, as far as it
// is derived: the smallest members of the cycles reached (folded into the
// claim's list of cycles) and the numbers whose fate stays open.
func (f rangeFacts) below() (derived bool, mins []string, open []string, text string) {
	if f.Below == nil {
		return false, nil, nil, ""
	}
	var parts []string
	for _, e := range *f.Below {
		switch e.Fate {
		case "cycle":
			mins = append(mins, string(e.CycleMin))
			if e.CycleMin == e.N {
				parts = append(parts, fmt.Sprintf("%s lies on a cycle, as its smallest member", e.N))
			} else {
				parts = append(parts, fmt.Sprintf("%s reaches the cycle whose smallest member is %s", e.N, e.CycleMin))
			}
		default: // 1 cannot drop below itself
			open = append(open, string(e.N))
			parts = append(parts, fmt.Sprintf("%s is undecided: %s", e.N, strings.Replace(f.undecidedDef(), "it ", "", 1)))
		}
	}
	if len(parts) > 0 {
		text = fmt.Sprintf(" By direct iteration within %s, %s.", count(f.Cap, "step", "steps"), strings.Join(parts, "; "))
	}
	return true, mins, open, text
}

// conclusion is what follows by strong induction, stated without a premise
// that may be false.
func (f rangeFacts) conclusion() string {
	derived, belowMins, open, _ := f.below()
	mins := mergeMins(belowMins, f.cycleMins())
	var alts []string
	subject := fmt.Sprintf("every n in %s", f.rangeText())
	switch {
	case !derived:
		alts = append(alts, fmt.Sprintf("what some number below %s reaches", f.Lo))
	case len(open) > 0:
		subject = "every n < " + numText(f.Hi)
		alts = append(alts, fmt.Sprintf("what %s reaches", list(open, "or")))
	default:
		subject = "every n < " + numText(f.Hi)
	}
	if len(mins) == 1 && mins[0] == "1" && len(alts) == 0 {
		alts = append(alts, "1") // reaching the cycle through 1 is reaching 1
	} else if len(mins) > 0 {
		alts = append(alts, "one of "+cyclesText(mins))
	}
	if f.Counts.Undecided != "0" {
		if f.Counts.Undecided == "1" {
			alts = append(alts, "what the undecided number reaches")
		} else {
			alts = append(alts, fmt.Sprintf("what one of the %s undecided numbers reaches", f.Counts.Undecided))
		}
	}
	if len(alts) == 0 { // an empty range below a start of 1 cannot happen; say so plainly if it does
		return "Nothing follows for any number."
	}
	s := fmt.Sprintf("Hence, by strong induction, %s reaches %s.", subject, alternatives(alts))
	if !derived && f.Map == "3n+1" {
		// The use a reader has for it: an extension of a bound below lo.
		then := "1"
		if len(alts) > 1 {
			then = alternatives(append([]string{"1"}, alts[1:]...))
		}
		s += fmt.Sprintf(" So if every number below %s reaches 1, every n < %s reaches %s.", f.Lo, numText(f.Hi), then)
	}
	return s
}

func mergeMins(a, b []string) []string {
	seen := map[string]bool{}
	var out []string
	for _, m := range append(append([]string{}, a...), b...) {
		if !seen[m] {
			seen[m] = true
			out = append(out, m)
		}
	}
	// In numeric order: by length, then digits.
	for i := 1; i < len(out); i++ {
		for j := i; j > 0 && (len(out[j]) < len(out[j-1]) || len(out[j]) == len(out[j-1]) && out[j] < out[j-1]); j-- {
			out[j], out[j-1] = out[j-1], out[j]
		}
	}
	return out
}

// sentence is the claim fit to quote.
func (f rangeFacts) sentence() string {
	rules := len(f.Counts.Rules) > 0
	s := fmt.Sprintf("For %s, the certificate gives each n in %s one of these: its stopping time, the least i with T^i(n) < n, "+
		"shown by the sieve, by a search or by direct iteration", f.mapText(), f.rangeText())
	if f.joins() {
		s += fmt.Sprintf("; a smaller number that n meets after %d steps, by a join of the sieve (n lies in a survivor class r mod 2^%d "+
			"that the sieve joins to a smaller residue r' with the same state after %d steps, so n meets n - r + r')", f.K, f.K, f.K)
	}
	if rules {
		s += "; a smaller predecessor m whose orbit passes through n, by a predecessor rule"
	}
	s += fmt.Sprintf("; a cycle that n reaches without dropping below itself; or that n is undecided: %s.", f.undecidedDef())
	if rules {
		var rs []string
		for _, r := range f.Counts.Rules {
			rs = append(rs, fmt.Sprintf("n = %s from m = %s in %s", r.Class, r.Predecessor, count(r.Steps, "step", "steps")))
		}
		s += fmt.Sprintf(" The predecessor rules, each proven for every q >= 0 by affine arithmetic: %s.", strings.Join(rs, "; "))
	}
	s += " Two numbers whose orbits share a value reach the same cycle, or neither reaches one, since from that value on the orbits " +
		"coincide; a number that drops shares a value with the smaller number it drops to"
	if f.joins() {
		s += ", a number resting on a join with the smaller number it meets"
	}
	if rules {
		s += ", and a number resting on a rule with its predecessor"
	}
	s += "."
	_, _, _, belowText := f.below()
	s += belowText
	s += " " + f.conclusion()
	return s
}

func (f rangeFacts) caveat() string {
	s := fmt.Sprintf("This is a claim about %s only", f.rangeText())
	if derived, _, _, _ := f.below(); derived && f.Lo == "2" {
		s += ", and about 1 by direct iteration"
	}
	s += fmt.Sprintf(", resting on the sieve certificate %s (k = %d), which must be checked with it.", f.SieveRoot, f.K)
	if derived, _, _, _ := f.below(); !derived {
		s += fmt.Sprintf(" It says nothing of what the numbers below %s reach.", f.Lo)
	}
	s += " It states stopping times only for the numbers justified by the sieve, by search or as small ones"
	if n := f.ruleNumbers(); n.Sign() > 0 {
		s += fmt.Sprintf("; the %s resting on predecessor rules may have larger ones than the largest stated", count(n.String(), "number", "numbers"))
	}
	if f.joins() {
		s += fmt.Sprintf("; so may the %s resting on joins of the sieve", count(f.Counts.Join, "number", "numbers"))
	}
	s += "."
	if f.Counts.Undecided != "0" {
		s += fmt.Sprintf(" An undecided number is not shown to grow without bound or to avoid a cycle: only that %s.", f.undecidedDef())
	}
	s += fmt.Sprintf(" It says nothing about numbers at or above %s, and is not a proof of %s.", numText(f.Hi), question(f.Map))
	return s
}
