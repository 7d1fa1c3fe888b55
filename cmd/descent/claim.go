package main

import (
	"fmt"
	"sort"
	"strconv"
	"strings"

	"descent/cert"
)

// facts is the claim of a sieve certificate, gathered either from the
// header as written (show) or from the checker's report (check), and put
// into words here once for both.
type facts struct {
	Map        string
	K, J       int
	Cap        uint32
	Ceiling    int
	Survivors  uint64 // all survivors, joined or not
	Joins      bool   // a sieve with joins
	Joined     uint64 // the survivors joined to smaller residues
	Closing    []closing
	Exceptions []excFact
}

type closing struct {
	Step    int
	Classes uint64
}

type excFact struct {
	N, Fate  string
	Steps    uint32
	CycleMin string
}

func factsFromHeader(h *cert.SieveHeader) facts {
	return factsFromReport(sieveReport(h, cert.Hash{}, 0))
}

// sieveReport is a report of the claim as written in a sieve header: it
// re-derives nothing (ModeUnchecked).
func sieveReport(h *cert.SieveHeader, root cert.Hash, chunks int) *Report {
	r := &Report{Mode: ModeUnchecked, Kind: "sieve", Root: root.String(), Map: h.Map.String(), K: h.K, J: h.J, Cap: h.Cap, Ceiling: h.Ceiling,
		Chunks: chunks, Survivors: Num(fmt.Sprint(h.Survivors)), ClosedAt: map[string]Num{}, Exceptions: []ExceptionReport{}}
	if h.Joins { // survivors: the classes still to search
		r.Survivors = Num(fmt.Sprint(h.Survivors - h.Joined))
		r.Joined, r.SieveSurvivors = Num(fmt.Sprint(h.Joined)), Num(fmt.Sprint(h.Survivors))
	}
	for t, n := range h.ClosedAt {
		if n > 0 {
			r.ClosedAt[fmt.Sprint(t+1)] = Num(fmt.Sprint(n))
		}
	}
	for _, e := range h.Exceptions {
		x := ExceptionReport{N: Num(e.N.String()), Fate: e.Fate.String(), Steps: e.Steps}
		if e.Fate == cert.Cycle {
			x.CycleMin = Num(e.CycleMin.String())
		}
		r.Exceptions = append(r.Exceptions, x)
	}
	return r
}

func factsFromReport(r *Report) facts {
	f := facts{Map: r.Map, K: r.K, J: r.J, Cap: r.Cap, Ceiling: r.Ceiling}
	f.Survivors, _ = strconv.ParseUint(string(r.Survivors), 10, 64)
	if r.Joined != "" {
		f.Joins = true
		f.Joined, _ = strconv.ParseUint(string(r.Joined), 10, 64)
		f.Survivors, _ = strconv.ParseUint(string(r.SieveSurvivors), 10, 64)
	}
	for step, n := range r.ClosedAt {
		t, _ := strconv.Atoi(step)
		c, _ := strconv.ParseUint(string(n), 10, 64)
		f.Closing = append(f.Closing, closing{Step: t, Classes: c})
	}
	sort.Slice(f.Closing, func(a, b int) bool { return f.Closing[a].Step < f.Closing[b].Step })
	for _, e := range r.Exceptions {
		f.Exceptions = append(f.Exceptions, excFact{N: string(e.N), Fate: e.Fate, Steps: e.Steps, CycleMin: string(e.CycleMin)})
	}
	return f
}

// mapText writes T out in full.
func (f facts) mapText() string {
	return fmt.Sprintf("T(n) = n/2 for even n, (%s)/2 for odd n", f.Map)
}

func (f facts) closedClasses() uint64 {
	var n uint64
	for _, c := range f.Closing {
		n += c.Classes
	}
	return n
}

func (e excFact) fateText(cap uint32, ceiling int) string {
	switch e.Fate {
	case "descends":
		return "descends below itself after " + count(e.Steps, "step", "steps")
	case "cycle":
		if e.CycleMin == e.N {
			return "lies on a cycle, as its smallest member"
		}
		return "reaches the cycle whose smallest member is " + e.CycleMin
	}
	return fmt.Sprintf("undecided: its orbit reaches 2^%d before dropping below it, or neither drops nor repeats within %s", ceiling, count(cap, "step", "steps"))
}

func (f facts) exceptionList() string {
	var parts []string
	for _, e := range f.Exceptions {
		parts = append(parts, fmt.Sprintf("n = %s %s", e.N, e.fateText(f.Cap, f.Ceiling)))
	}
	return strings.Join(parts, "; ")
}

// summary is the claim in one line.
func (f facts) summary() string {
	s := fmt.Sprintf("%s: %d of the 2^%d residues %s %s; the rest lie in %s; %s",
		f.Map, f.Survivors, f.K, agree(f.Survivors, "survives", "survive"), count(f.J, "step", "steps"),
		count(f.closedClasses(), "closing class", "closing classes"), count(len(f.Exceptions), "exception", "exceptions"))
	if len(f.Exceptions) > 0 && len(f.Exceptions) <= 3 {
		s += " (" + f.exceptionList() + ")"
	}
	if f.Joins {
		s += fmt.Sprintf("; %s, %d %s to search", count(f.Joined, "survivor joins a smaller residue", "survivors join smaller residues"),
			f.Survivors-f.Joined, agree(f.Survivors-f.Joined, "remains", "remain"))
	}
	return s
}

// joinText is the claim of the joins, fit to quote.
func (f facts) joinText() string {
	return fmt.Sprintf(" Of the survivors, %d %s a smaller residue: for such a survivor r there is an r' < r "+
		"whose first %d steps have as many odd steps as r's and T^%d(r') = T^%d(r), so T^%d(2^%d*q + r) = T^%d(2^%d*q + r') "+
		"for every q >= 0, and n = 2^%d*q + r reaches what the smaller n - (r - r') reaches. "+
		"That leaves %s to search.", f.Joined, agree(f.Joined, "joins", "join"), f.K, f.K, f.K, f.K, f.K, f.K, f.K, f.K,
		count(f.Survivors-f.Joined, "survivor class", "survivor classes"))
}

// sentence is the claim fit to quote.
func (f facts) sentence() string {
	a, _, _ := strings.Cut(f.Map, "n")
	classes := fmt.Sprintf("one of %d classes r mod 2^t (t <= %d) that close at step t", f.closedClasses(), f.J)
	if f.closedClasses() == 1 {
		classes = fmt.Sprintf("the one class r mod 2^t (t <= %d) that closes at step t", f.J)
	}
	s := fmt.Sprintf("Under %s, every residue mod 2^%d lies either in %s, or among the survivors (%d of them). "+
		"A class closes at step t when its first t steps have s odd ones with %s^s < 2^t; then T^t(n) = (%s^s*n + c)/2^t for every member n, so T^t(n) < n "+
		"for every member above c/(2^t - %s^s).",
		f.mapText(), f.K, classes, f.Survivors, a, a, a)
	switch len(f.Exceptions) {
	case 0:
		s += " No positive member of a closing class lies at or below its threshold."
	case 1:
		s += fmt.Sprintf(" One member lies at or below its threshold, decided by direct iteration within %s: %s.",
			count(f.Cap, "step", "steps"), f.exceptionList())
	default:
		s += fmt.Sprintf(" The members at or below their threshold are these %d, decided by direct iteration within %s: %s.",
			len(f.Exceptions), count(f.Cap, "step", "steps"), f.exceptionList())
	}
	if f.Joins {
		s += f.joinText()
	}
	return s
}

// caveat says what the claim does not prove.
func (f facts) caveat() string {
	return fmt.Sprintf("This is a bounded claim about %s. Beyond the fates of the exceptions listed, "+
		"it does not show that any number reaches 1 or a cycle: a member that drops below itself is only shown "+
		"smaller after t steps. It says nothing about the %s beyond step %d, and it is not a proof of %s. "+
		"A claim about every n below a bound needs, besides this sieve, a search of the survivor classes (a range certificate).",
		firstSteps(f.J), count(f.Survivors, "survivor", "survivors"), f.J, question(f.Map)) + f.joinCaveat()
}

func (f facts) joinCaveat() string {
	if !f.Joins {
		return ""
	}
	return " A join moves the question from n to a smaller number; it settles n only together with a proof " +
		"for that smaller number (by strong induction, as a range search supplies). Survivors not listed as joined " +
		"may still join some residue: finding joins is not exhaustive for every k."
}
