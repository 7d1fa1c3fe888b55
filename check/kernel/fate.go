package kernel

import (
	"fmt"
	"math"
	"math/big"
	"sync/atomic"
)

// Fates and exceptions (SPEC.md, section 1), work (section 4), the small
// bound (section 6) and predecessor rules (section 9), in math/big.

// apply sets x to T(x) and says whether the step was odd.
func (p *Params) apply(x *big.Int) bool {
	if x.Bit(0) == 0 {
		x.Rsh(x, 1)
		return false
	}
	x.Mul(x, big.NewInt(int64(p.A))).Add(x, big.NewInt(int64(p.B))).Rsh(x, 1)
	return true
}

// bound is the exception bound of section 1 ("Bound on exceptions") for
// b > 0: the largest floor(s*b*a^s / (2*(2^t - a^s))) over the s <= j odd
// steps that close at t <= j, t the bit length of a^s; 0 for b < 0. With
// small, for b < 0 it is the small bound N0 of a range (section 6, "The
// small bound"): t is then the last depth at which s odd steps are open,
// min(bitlen(a^s) - 1, j), and the denominator 2*(a^s - 2^t).
func (p *Params) bound(small bool) *big.Int {
	limit := new(big.Int)
	for s := 1; s <= p.J; s++ {
		as, t := p.pow(s), p.alen[s]
		if p.B < 0 {
			t = min(t-1, p.J)
		}
		if p.B > 0 && t <= p.J || p.B < 0 && small {
			num := new(big.Int).Mul(as, big.NewInt(int64(s)*int64(max(p.B, -p.B))))
			den := new(big.Int).Sub(new(big.Int).Lsh(big.NewInt(1), uint(t)), as)
			if q := num.Div(num, den.Lsh(den.Abs(den), 1)); q.Cmp(limit) > 0 {
				limit = q
			}
		}
	}
	return limit
}

// Meter counts the steps of T a derivation may still take; a nil Meter
// allows any number. It is safe for concurrent use.
type Meter struct{ left atomic.Int64 }

func NewMeter(steps *big.Int) *Meter {
	m := &Meter{}
	m.left.Store(math.MaxInt64)
	if steps.IsInt64() {
		m.left.Store(steps.Int64())
	}
	return m
}

// Charge takes n steps and reports whether to go on.
func (m *Meter) Charge(n int64) bool { return m == nil || m.left.Add(-n) >= 0 }

func (m *Meter) Exceeded() bool { return m != nil && m.left.Load() < 0 }

// Fate decides n by the fate rule with cap C and ceiling W (SPEC.md,
// "Fates"), x_i = T^i(n): it descends at the first i <= C with x_i < n,
// unless an earlier x_i reached 2^W (undecided); otherwise the orbit
// repeats within x_0..x_C exactly when x_C is one of x_0..x_(C-1), and then
// x_C lies on the cycle. Every step is charged to m; a meter that runs out
// stops it, undecided.
func (p *Params) Fate(n *big.Int, C uint32, W int, m *Meter) Fate {
	x, undecided := new(big.Int).Set(n), Fate{N: n, Kind: Undecided}
	for i := uint32(1); i <= C; i++ {
		if p.apply(x); !m.Charge(1) {
			return undecided
		} else if x.Cmp(n) < 0 {
			return Fate{N: n, Kind: Descends, Steps: i}
		} else if x.BitLen() > W {
			return undecided
		}
	}
	y := new(big.Int).Set(n)
	for i := uint32(0); i < C; i++ {
		if y.Cmp(x) == 0 { // x = x_C lies on the cycle: go round it once
			least := new(big.Int).Set(x)
			for p.apply(y); y.Cmp(x) != 0; p.apply(y) {
				if !m.Charge(1) {
					return undecided
				} else if y.Cmp(least) < 0 {
					least.Set(y)
				}
			}
			return Fate{N: n, Kind: Cycle, CycleMin: least}
		}
		if p.apply(y); !m.Charge(1) {
			return undecided
		}
	}
	return undecided
}

func (e Fate) String() string {
	switch e.Kind {
	case Descends:
		return fmt.Sprintf("descends after %d steps", e.Steps)
	case Cycle:
		return fmt.Sprintf("reaches the cycle whose smallest member is %v", e.CycleMin)
	}
	return "undecided within the cap"
}

// exceptions finds every exception afresh up to the bound (n whose class
// closes at step t with T^t(n) >= n) and compares the header's list with
// them in increasing order, fates included (section 3, step 10). The work
// bound, checked before, keeps the bound within int64.
func (p *Params) exceptions(h *SieveHeader) *Failure {
	limit, listed := p.bound(false), h.Exceptions
	fail := func(n *big.Int, format string, args ...any) *Failure {
		return invalid(ReasonException, Where{N: n.String(), Claim: "exception"}, format, args...)
	}
	for n := int64(1); n <= limit.Int64(); n++ {
		bn, x, is, t := big.NewInt(n), big.NewInt(n), false, 0
		for s := 0; t < p.J && !p.Closes(t, s); {
			if t++; p.apply(x) {
				s++
			}
			if p.Closes(t, s) {
				is = x.Cmp(bn) >= 0
			}
		}
		inList := len(listed) > 0 && listed[0].N.Cmp(bn) == 0
		if is && !inList {
			return fail(bn, "n = %d is an exception (its class closes at step %d and T^%d(n) >= n) but is not listed", n, t, t)
		} else if !is && inList {
			return fail(bn, "n = %d is listed as an exception but is none: its class does not close within %d steps, or T^t(n) < n at the step t where it closes", n, p.J)
		} else if is {
			e, l := p.Fate(bn, h.Cap, h.Ceiling, nil), listed[0]
			if e.Kind != l.Kind || e.Steps != l.Steps || e.Kind == Cycle && e.CycleMin.Cmp(l.CycleMin) != 0 {
				return fail(bn, "n = %d %s, not as listed: %s", n, e, l)
			}
			listed = listed[1:]
		}
	}
	if len(listed) > 0 {
		return fail(listed[0].N, "%v is listed as an exception, but every exception is at most %v", listed[0].N, limit)
	}
	return nil
}

// DefaultBudget is the budget when none is given: 2^48 steps, some days of
// one core at most.
const DefaultBudget = 1 << 48

func budget(o Options) *big.Int {
	if o.Budget > 0 {
		return new(big.Int).SetUint64(o.Budget)
	}
	return big.NewInt(DefaultBudget)
}

func overBudget(what string, bound, budget *big.Int) *Failure {
	return &Failure{Class: ErrLimits, Reason: ReasonLimits, Hint: "raise the budget with -budget N if the work is wanted",
		Msg: fmt.Sprintf("%s needs up to %v steps of work (SPEC.md, \"Work\"), more than the budget of %v", what, bound, budget)}
}

// sieveWork is the work bound of a sieve, E*j + 3*C*X (section 4).
func (p *Params) sieveWork(h *SieveHeader, budget *big.Int) *Failure {
	w := new(big.Int).Mul(p.bound(false), big.NewInt(int64(p.J)))
	if w.Add(w, new(big.Int).SetUint64(3*uint64(h.Cap)*uint64(len(h.Exceptions)))); w.Cmp(budget) > 0 {
		return overBudget(fmt.Sprintf("the exceptions of %s with j = %d (%d listed, cap %d)", p.Map, p.J, len(h.Exceptions), h.Cap), w, budget)
	}
	return nil
}

// blockWork is the work bound of deriving block i with summary s,
// 2^(k+1) + 2*N + S + 4*C*(cycle + undecided) (section 4), and its part
// S + 4*C*(cycle + undecided): the steps of search and fates a true block
// never exceeds.
func (h *RangeHeader) blockWork(i int, s *Summary) (total, steps *big.Int) {
	steps = new(big.Int).Add(s.Counts[CCycle], s.Counts[CUndecided])
	steps.Mul(steps, new(big.Int).SetUint64(4*uint64(h.Cap))).Add(steps, s.Sum)
	lo, hi := h.Bounds(i)
	total = new(big.Int).Lsh(hi.Sub(hi, lo), 1)
	total.Add(total, new(big.Int).Lsh(big.NewInt(1), uint(h.K+1)))
	return total.Add(total, steps), steps
}

// proveRules proves every rule for all q (section 9). The predecessor is
// carried as an affine form A*q + B: before each step A must be even, so
// that A*q + B has the parity of B whatever q is; the step maps it to
// (A/2)*q + B/2 or (a*A/2)*q + (a*B + b)/2. After the last step it must be
// M*q + c. The predecessor is positive and smaller for every q >= 0 when
// M' <= M and 1 <= c' < c.
func (h *RangeHeader) proveRules() *Failure {
	a, b := big.NewInt(int64(h.A)), big.NewInt(int64(h.B))
	for i, r := range h.Rules {
		where := Where{Claim: fmt.Sprintf("rule %d: %d*q+%d <- %d*q+%d in %d steps", i, r.M, r.C, r.Mp, r.Cp, r.Steps)}
		if r.Mp > r.M || r.Cp >= r.C || r.Cp < 1 || r.Mp < 1 {
			return invalid(ReasonRule, where, "rule %d: the predecessor must be positive and smaller for every q >= 0, which needs 1 <= M' <= M, 1 <= c' < c", i)
		}
		A, B := new(big.Int).SetUint64(r.Mp), new(big.Int).SetUint64(r.Cp)
		for t := 1; t <= r.Steps; t++ {
			if A.Bit(0) == 1 {
				return invalid(ReasonRule, where, "rule %d: before step %d the predecessor's value is %v*q + %v, whose parity depends on q", i, t, A, B)
			} else if B.Bit(0) == 1 {
				A.Mul(A, a)
				B.Mul(B, a).Add(B, b)
			}
			A.Rsh(A, 1)
			B.Rsh(B, 1)
		}
		if A.Cmp(new(big.Int).SetUint64(r.M)) != 0 || B.Cmp(new(big.Int).SetUint64(r.C)) != 0 {
			return invalid(ReasonRule, where, "rule %d: after %d steps the predecessor is %v*q + %v, not %d*q + %d", i, r.Steps, A, B, r.M, r.C)
		}
	}
	return nil
}

// RuleFor returns the first rule that covers n (n >= c, n = c mod M), or -1.
func (h *RangeHeader) RuleFor(n *big.Int) int {
	x := new(big.Int)
	for i, r := range h.Rules {
		if n.Cmp(x.SetUint64(r.C)) >= 0 && x.Mod(n, x.SetUint64(r.M)).Uint64() == r.C%r.M {
			return i
		}
	}
	return -1
}
