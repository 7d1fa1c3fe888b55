package check

import (
	"fmt"
	"math/big"
)

// exceptionLimit bounds every exception (SPEC.md, "Exceptions"). A class
// closing at t with s odd steps has T^t(n) = (a^s*n + c)/2^t, and since each
// shorter prefix of its parity vector was still open, c <= s*b*a^s/2; its
// exceptions satisfy (2^t - a^s)*n <= c. A class can close only at t equal
// to the bit length of a^s.
func (sv *sieve) exceptionLimit() *big.Int {
	limit := new(big.Int)
	if sv.h.b < 0 {
		return limit // then c < 0 and no member is an exception
	}
	for s := 1; s <= sv.j; s++ {
		t := sv.alen[s]
		if t > sv.j {
			continue
		}
		as := new(big.Int).Exp(sv.A, big.NewInt(int64(s)), nil)
		num := new(big.Int).Mul(as, big.NewInt(int64(s)))
		num.Mul(num, sv.B)
		den := new(big.Int).Lsh(big.NewInt(1), uint(t))
		den.Sub(den, as)
		den.Lsh(den, 1)
		if q := num.Div(num, den); q.Cmp(limit) > 0 {
			limit = q
		}
	}
	return limit
}

// apply sets x to T(x) and says whether the step was odd.
func (sv *sieve) apply(x *big.Int) bool {
	if x.Bit(0) == 0 {
		x.Rsh(x, 1)
		return false
	}
	x.Mul(x, sv.A)
	x.Add(x, sv.B)
	x.Rsh(x, 1)
	return true
}

// isException follows n until its class closes (or j steps pass) and says
// whether n is at or below its class's threshold: T^t(n) >= n.
func (sv *sieve) isException(n *big.Int) (bool, int) {
	x := new(big.Int).Set(n)
	s := 0
	for t := 1; t <= sv.j; t++ {
		if sv.apply(x) {
			s++
		}
		if sv.closesAt(t, s) {
			return x.Cmp(n) >= 0, t
		}
	}
	return false, 0
}

// fateOf decides n by the fate rule (SPEC.md, "Fates"), x_i = T^i(n):
// it descends at the first i <= cap with x_i < n, unless an earlier x_i
// reached the ceiling 2^W, which makes it undecided; if neither happens,
// its orbit repeats within x_0..x_cap exactly when x_cap is one of
// x_0..x_(cap-1), and then x_cap is on the cycle; else it is undecided.
// Every value it computes is below 2^W. Each step is charged to sv.work.
func (sv *sieve) fateOf(n *big.Int) exception {
	x := new(big.Int).Set(n)
	w := sv.h.ceiling
	for i := uint32(1); i <= sv.h.cap; i++ {
		if sv.apply(x); !sv.work.charge(1) {
			return exception{n: n, fate: 3}
		}
		if x.Cmp(n) < 0 {
			return exception{n: n, fate: 1, steps: i}
		}
		if x.BitLen() > w {
			return exception{n: n, fate: 3}
		}
	}
	end := new(big.Int).Set(x)
	y := new(big.Int).Set(n)
	for i := uint32(0); i < sv.h.cap; i++ {
		if y.Cmp(end) == 0 {
			least := new(big.Int).Set(end)
			for sv.apply(y); y.Cmp(end) != 0; sv.apply(y) {
				if !sv.work.charge(1) {
					return exception{n: n, fate: 3}
				}
				if y.Cmp(least) < 0 {
					least.Set(y)
				}
			}
			return exception{n: n, fate: 2, cycleMin: least}
		}
		if sv.apply(y); !sv.work.charge(1) {
			return exception{n: n, fate: 3}
		}
	}
	return exception{n: n, fate: 3}
}

func fateName(e exception) string {
	switch e.fate {
	case 1:
		return fmt.Sprintf("descends after %d steps", e.steps)
	case 2:
		if e.cycleMin.Cmp(e.n) == 0 {
			return "lies on a cycle, as its smallest member"
		}
		return fmt.Sprintf("reaches the cycle whose smallest member is %v", e.cycleMin)
	}
	return "undecided within the cap"
}

func sameFate(x, y exception) bool {
	return x.fate == y.fate && x.steps == y.steps &&
		(x.fate != 2 || x.cycleMin.Cmp(y.cycleMin) == 0)
}

// sieveLimits compares the work bound of the exceptions, E*j + 3*C*X,
// with the budget (SPEC.md, "Work").
func (sv *sieve) sieveLimits(budget *big.Int) *Failure {
	if w := sv.sieveWork(sv.exceptionLimit()); w.Cmp(budget) > 0 {
		return overBudget(fmt.Sprintf("the exceptions of %s with j = %d (%d listed, cap %d)", sv.name, sv.j, len(sv.h.exc), sv.h.cap), w, budget)
	}
	return nil
}

// checkExceptions finds every exception afresh and compares the header's
// list with it, entry by entry in increasing order.
//
// The caller has compared the work bound with the budget (sieveLimits),
// which keeps the limit within int64.
func (sv *sieve) checkExceptions() *Failure {
	limit := sv.exceptionLimit()
	listed := sv.h.exc
	for n := int64(1); n <= limit.Int64(); n++ {
		bn := big.NewInt(n)
		is, t := sv.isException(bn)
		inList := len(listed) > 0 && listed[0].n.Cmp(bn) == 0
		switch {
		case is && !inList:
			return sv.excFail(bn, "listed", "missing", "n = %d is an exception (its class closes at step %d and T^%d(n) >= n) but is not listed", n, t, t)
		case !is && inList:
			return sv.excFail(bn, "not an exception", "listed", "n = %d is listed as an exception but is none: %s", n, sv.why(bn))
		case is:
			got := sv.fateOf(bn)
			if !sameFate(got, listed[0]) {
				return sv.excFail(bn, fateName(got), fateName(listed[0]), "n = %d %s, not as listed: %s", n, fateName(got), fateName(listed[0]))
			}
			listed = listed[1:]
		}
	}
	if len(listed) > 0 {
		return sv.excFail(listed[0].n, "not an exception", "listed",
			"%v is listed as an exception, but every exception is at most %v", listed[0].n, limit)
	}
	return nil
}

func (sv *sieve) why(n *big.Int) string {
	if _, t := sv.isException(n); t > 0 {
		return fmt.Sprintf("its class closes at step %d and T^%d(n) < n", t, t)
	}
	return fmt.Sprintf("its class does not close within %d steps (a survivor)", sv.j)
}

func (sv *sieve) excFail(n *big.Int, expected, found, format string, args ...any) *Failure {
	return invalid(ReasonException, Where{N: n.String(), Claim: "exception", Expected: expected, Found: found}, format, args...)
}
