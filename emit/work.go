package emit

import (
	"context"
	"errors"
	"fmt"
	"math/big"
	"sync"
	"sync/atomic"
)

// MaxWork bounds the big-number work of one certificate (SPEC.md,
// "Work"): every step of the fate rule or of the search that is taken on a
// value of at least 2^128 costs the value's length in 64-bit words. Orbits
// that grow without bound make that work grow as the square of the cap; a
// run that would pass the bound stops, so that no certificate asks a
// checker for more (the checker applies the same bound).
const MaxWork = 1 << 32

var errWork = errors.New("the certificate would need more big-number work than a checker allows")

// meter counts work and watches for cancellation; the first failure sticks.
type meter struct {
	ctx   context.Context
	left  atomic.Int64
	calls atomic.Int64
	once  sync.Once
	err   atomic.Pointer[error]
}

func newMeter(ctx context.Context) *meter {
	m := &meter{ctx: ctx}
	m.left.Store(MaxWork)
	return m
}

func (m *meter) fail(err error) {
	m.once.Do(func() { m.err.Store(&err) })
}

// failed returns the first failure, or nil.
func (m *meter) failed() error {
	if m == nil {
		return nil
	}
	if p := m.err.Load(); p != nil {
		return *p
	}
	return nil
}

// charge accounts for one step on x and reports whether to go on.
func (m *meter) charge(x *big.Int) bool {
	if m == nil {
		return true
	}
	if n := x.BitLen(); n > 128 {
		if m.left.Add(-int64((n+63)/64)) < 0 {
			m.fail(fmt.Errorf("%w (%d units); lower the step cap", errWork, MaxWork))
		}
	}
	if m.calls.Add(1)&4095 == 0 && m.ctx != nil && m.ctx.Err() != nil {
		m.fail(m.ctx.Err())
	}
	return m.err.Load() == nil
}
