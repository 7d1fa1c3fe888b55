package check

import (
	"fmt"
	"math/big"
	"sync/atomic"
)

// maxWork bounds the big-number work of a check (SPEC.md, "Work"): each
// step of the fate rule or of the search taken on a value of at least
// 2^128 costs the value's length in 64-bit words. A certificate whose claims
// need more is beyond this checker's limits; the emitter keeps to the same
// bound, so a certificate it wrote never is.
const maxWork = 1 << 32

type meter struct {
	left atomic.Int64
	over atomic.Bool
}

func newMeter() *meter {
	m := &meter{}
	m.left.Store(maxWork)
	return m
}

// charge accounts for one step on x and reports whether to go on.
func (m *meter) charge(x *big.Int) bool {
	if m == nil {
		return true
	}
	if n := x.BitLen(); n > 128 && m.left.Add(-int64((n+63)/64)) < 0 {
		m.over.Store(true)
	}
	return !m.over.Load()
}

func (m *meter) exceeded() *Failure {
	if m == nil || !m.over.Load() {
		return nil
	}
	return &Failure{Class: ErrLimits, Reason: "limits",
		Msg: fmt.Sprintf("the claims need more than %d units of big-number work (values above 2^128 over many steps); this checker stops there", maxWork)}
}
