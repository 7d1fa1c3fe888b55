package check

import (
	"fmt"
	"math"
	"math/big"
	"sync/atomic"
)

// The work a certificate may ask of a checker (SPEC.md, "Work") is a
// bound computed from its header and records before the work starts, in
// steps of T (each on a value below 2^W, so at most W/64 machine words):
//
//	sieve:  E*j + 3*C*X        E the exception bound, X the exceptions listed
//	range:  the sum over the blocks to derive of
//	        2^(k+1) + 2*N + S + 4*C*(cycle + undecided)
//	        N the block's numbers, S its sum of stopping times
//
// A certificate whose bound exceeds the reader's budget is refused as
// beyond limits, before that work; one within it is checked in full. The
// walk of the chunks and the joins cost work in proportion to the file's
// size and are not counted.

// DefaultBudget is the budget when none is given: 2^48 steps, some days of
// one core at most, and far more than any certificate of the README needs.
const DefaultBudget = 1 << 48

func budgetOf(o Options) *big.Int {
	if o.Budget > 0 {
		return new(big.Int).SetUint64(o.Budget)
	}
	return big.NewInt(DefaultBudget)
}

func overBudget(what string, bound, budget *big.Int) *Failure {
	return &Failure{Class: ErrLimits, Reason: ReasonLimits,
		Msg:  fmt.Sprintf("%s needs up to %v steps of work (SPEC.md, \"Work\"), more than the budget of %v", what, bound, budget),
		Hint: "raise the budget with -budget N if the work is wanted"}
}

// sieveWork is E*j + 3*C*X.
func (sv *sieve) sieveWork(limit *big.Int) *big.Int {
	w := new(big.Int).Mul(limit, big.NewInt(int64(sv.j)))
	fates := new(big.Int).SetUint64(3 * uint64(sv.h.cap))
	fates.Mul(fates, big.NewInt(int64(len(sv.h.exc))))
	return w.Add(w, fates)
}

// blockWork is the bound on deriving a block of n numbers with summary s:
// 2^(k+1) + 2*n + S + 4*C*(cycle + undecided). The part that the search
// and the fate rule may spend, S + 4*C*(cycle + undecided), is returned
// as steps: a true block never needs more.
func blockWork(k int, cap uint32, n *big.Int, s *summary) (total, steps *big.Int) {
	steps = new(big.Int).Add(s.counts[cCycle], s.counts[cUndecided])
	steps.Mul(steps, new(big.Int).SetUint64(4*uint64(cap)))
	steps.Add(steps, s.sum)
	total = new(big.Int).Lsh(big.NewInt(1), uint(k+1))
	total.Add(total, new(big.Int).Lsh(n, 1))
	return total.Add(total, steps), steps
}

// meter counts the steps a block's derivation takes against what its own
// counts allow; a true block never runs out (SPEC.md, "Work").
type meter struct {
	left atomic.Int64
	over atomic.Bool
}

func newMeter(steps *big.Int) *meter {
	m := &meter{}
	if steps.IsInt64() {
		m.left.Store(steps.Int64())
	} else {
		m.left.Store(math.MaxInt64)
	}
	return m
}

// charge takes n steps and reports whether to go on.
func (m *meter) charge(n int64) bool {
	if m == nil {
		return true
	}
	if m.left.Add(-n) < 0 {
		m.over.Store(true)
	}
	return !m.over.Load()
}

func (m *meter) exceeded() bool { return m != nil && m.over.Load() }
