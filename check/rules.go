package check

import (
	"fmt"
	"math/big"
)

// Predecessor rules (SPEC.md, section 9): n = M*q + c has the smaller
// predecessor m = M'*q + c' with T^i(m) = n, for every q >= 0.

type rule struct {
	m, c, mp, cp uint64
	steps        int
}

func (r rule) String() string {
	return fmt.Sprintf("%d*q+%d <- %d*q+%d in %d steps", r.m, r.c, r.mp, r.cp, r.steps)
}

const (
	maxRules       = 16
	maxRuleSteps   = 64
	maxRuleModulus = 1 << 62
)

// proveRules proves every rule of h for all q at once. The predecessor is
// carried as an affine form A*q + B: before each step A must be even, so
// that A*q + B has the parity of B whatever q is; the step then maps the
// form to (A/2)*q + B/2 or (a*A/2)*q + (a*B + b)/2. After the last step the
// form must be M*q + c. The predecessor is smaller for every q >= 0 when
// M' <= M and c' < c, and a positive number when c' >= 1.
func proveRules(h *rangeHeader) *Failure {
	a, b := big.NewInt(int64(h.a)), big.NewInt(int64(h.b))
	for i, r := range h.rules {
		where := Where{Claim: fmt.Sprintf("rule %d: %v", i, r)}
		if r.mp > r.m || r.cp >= r.c || r.cp < 1 || r.mp < 1 {
			where.Expected, where.Found = "a predecessor below n for every q >= 0", fmt.Sprintf("M' = %d, c' = %d against M = %d, c = %d", r.mp, r.cp, r.m, r.c)
			return invalid(ReasonRule, where, "rule %d (%v): the predecessor must be positive and smaller for every q >= 0, which needs M' <= M, 1 <= c' < c", i, r)
		}
		A, B := new(big.Int).SetUint64(r.mp), new(big.Int).SetUint64(r.cp)
		for t := 1; t <= r.steps; t++ {
			if A.Bit(0) == 1 {
				where.Step = t
				where.Expected, where.Found = "a parity fixed by the class", fmt.Sprintf("%v*q + %v", A, B)
				return invalid(ReasonRule, where, "rule %d (%v): before step %d the predecessor's value is %v*q + %v, whose parity depends on q", i, r, t, A, B)
			}
			if B.Bit(0) == 1 {
				A.Mul(A, a)
				B.Mul(B, a).Add(B, b)
			}
			A.Rsh(A, 1)
			B.Rsh(B, 1)
		}
		M, C := new(big.Int).SetUint64(r.m), new(big.Int).SetUint64(r.c)
		if A.Cmp(M) != 0 || B.Cmp(C) != 0 {
			where.Expected, where.Found = fmt.Sprintf("%v*q + %v", M, C), fmt.Sprintf("%v*q + %v", A, B)
			return invalid(ReasonRule, where, "rule %d (%v): after %d steps the predecessor is %v*q + %v, not %v*q + %v", i, r, r.steps, A, B, M, C)
		}
	}
	return nil
}

// ruleFor returns the first rule that covers n, or -1.
func (h *rangeHeader) ruleFor(n uint64) int {
	for i, r := range h.rules {
		if n >= r.c && (n-r.c)%r.m == 0 {
			return i
		}
	}
	return -1
}

// ruleForBig is ruleFor for any n.
func (h *rangeHeader) ruleForBig(n *big.Int) int {
	if n.IsUint64() {
		return h.ruleFor(n.Uint64())
	}
	x := new(big.Int)
	for i, r := range h.rules {
		// n > 2^64 > c: only the class matters.
		if x.Mod(n, new(big.Int).SetUint64(r.m)).Uint64() == r.c%r.m {
			return i
		}
	}
	return -1
}
