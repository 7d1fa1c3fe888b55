package emit

import (
	"context"
	"math/big"
	"sync"
	"sync/atomic"
)

// meter watches for cancellation during the long loops of the fate rule
// and the search; the first failure sticks. The work of each number is
// bounded by the certificate's own step cap and ceiling (SPEC.md, "Work"),
// so no other limit is needed here.
type meter struct {
	ctx   context.Context
	calls atomic.Int64
	once  sync.Once
	err   atomic.Pointer[error]
}

func newMeter(ctx context.Context) *meter { return &meter{ctx: ctx} }

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
func (m *meter) charge(*big.Int) bool {
	if m == nil {
		return true
	}
	if m.calls.Add(1)&4095 == 0 && m.ctx != nil && m.ctx.Err() != nil {
		m.fail(m.ctx.Err())
	}
	return m.err.Load() == nil
}
