package check

import "math/big"

// What the numbers below a range reach. A range certificate shows that
// every n in [lo, hi) reaches what some smaller number reaches (or a
// listed cycle, or what an undecided number reaches); from lo <= 2 the
// only smaller number is 1, whose fate the checker derives itself, so that
// the claim can name every cycle reached below hi.

// maxBelowWork bounds the steps of deriving what 1 reaches; an orbit of 1
// that needs more is reported as not derived rather than waited for.
const maxBelowWork = 1 << 24

// FatesBelow derives, by direct iteration within cap steps and below the
// ceiling 2^ceiling (the fate rule of SPEC.md, section 1), what each number below lo reaches under the map
// an+b, when lo <= 2. It returns nil when lo > 2 or the work would exceed
// the bound: then nothing is derived.
func FatesBelow(a uint32, b int32, cap uint32, ceiling int, lo *big.Int) *[]ExceptionReport {
	if lo == nil || lo.Cmp(big.NewInt(2)) > 0 {
		return nil
	}
	sv := newSieve(&sieveHeader{a: a, b: b, k: 1, j: 1, cap: cap, ceiling: ceiling})
	sv.work = newMeter(big.NewInt(maxBelowWork))
	out := []ExceptionReport{}
	for n := int64(1); n < lo.Int64(); n++ {
		e := sv.fateOf(big.NewInt(n))
		if sv.work.exceeded() {
			return nil
		}
		out = append(out, exceptionReport(e))
	}
	return &out
}

func fatesBelow(h *rangeHeader) *[]ExceptionReport {
	return FatesBelow(h.a, h.b, h.cap, h.ceiling, h.lo)
}

func exceptionReport(e exception) ExceptionReport {
	r := ExceptionReport{N: Num(e.n.String()), Fate: [...]string{"", "descends", "cycle", "undecided"}[e.fate], Steps: e.steps}
	if e.fate == 2 {
		r.CycleMin = Num(e.cycleMin.String())
	}
	return r
}
