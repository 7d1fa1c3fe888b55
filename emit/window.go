package emit

import (
	"math"
	"math/big"
	"math/bits"
)

// The window search: for numbers far above the sieve's thresholds, where a
// drop is rare until the orbit's parity vector closes.
//
// After i steps with S odd ones, a map with b > 0 has T^i(n) >= a^S*n/2^i,
// so n cannot have dropped while a^S >= 2^i. Write L for a lower bound of
// log2(a) in fixed point (2^slackShift units) and keep the slack
// i*2^slackShift - S*L: a drop at step i+j needs a^(S+s_j) < 2^(i+j), hence
// (S+s_j)*L < i+j, that is, s_j*L - j*2^slackShift < slack. The window
// table gives, for the low windowBits bits of a value, the m-step jump
// (d = T^m(low bits), a^s) and the least of s_j*L - j*2^slackShift over its
// prefixes j = 1..m. While that least value is at or above the slack, no
// drop can happen within the window and the whole window is taken in one
// lookup; otherwise the number leaves the window search for the exact
// search (searchFrom), which compares the value with n at every step that
// could drop. The bound L only decides which path a number takes, never a
// stopping time, so rounding it down costs at most an early hand-over.

const (
	windowBits = 12
	slackShift = 24
)

// windowEntry is one entry of the window table.
type windowEntry struct {
	d, mul uint64
	least  int32 // least of s_j*L - j<<slackShift, j = 1..windowBits
	dslack int32 // windowBits<<slackShift - s*L: the slack's change over the window
}

// windowTable builds the table for a map with b > 0, or returns nil when an
// entry would not fit its fields exactly. It also returns L and the bound on
// the high word of a value at or below which one window stays within 128
// bits: the product (x >> m)*a^s is below (hi+1)*2^(128-m)*a^m/2^64, and
// hi <= (2^64-1)/a^m keeps it, plus d < 2^64, below 2^128.
func (r *rules) windowTable() ([]windowEntry, int64, uint64) {
	if r.m.B <= 0 {
		return nil, 0, 0
	}
	top := new(big.Int).Exp(r.bigA, big.NewInt(windowBits), nil)
	if top.BitLen() > 62 {
		return nil, 0, 0
	}
	// log2(a) in float64 is within a few ulps; one unit less is a lower bound.
	l := int64(math.Floor(math.Log2(float64(r.a))*(1<<slackShift))) - 1
	limit := ^uint64(0) / top.Uint64()
	t := make([]windowEntry, 1<<windowBits)
	for x := range t {
		v, s := new(big.Int).SetInt64(int64(x)), int64(0)
		least := int64(math.MaxInt32)
		for j := int64(1); j <= windowBits; j++ {
			if r.step(v) {
				s++
			}
			least = min(least, s*l-j<<slackShift)
		}
		// v is T^m(x) for x < 2^m: the bits above m are zero, so it is d.
		mul := new(big.Int).Exp(r.bigA, big.NewInt(s), nil)
		if v.BitLen() > 63 || least < math.MinInt32 || least > math.MaxInt32 {
			return nil, 0, 0
		}
		t[x] = windowEntry{d: v.Uint64(), mul: mul.Uint64(), least: int32(least), dslack: int32(windowBits<<slackShift - s*l)}
	}
	return t, l, limit
}

// windowJob is a number n with x = T^i(n) and its slack, for the window
// search.
type windowJob struct {
	n, hi, lo uint64
	slack     int64
	i         uint32
	at        uint32 // its index among the jobs of the flush
}

// windowPass takes one window for every job that cannot drop within it and
// returns them, in order, at the front of jobs; the others (a drop
// possible, the value near the limit, or the cap near) are appended to
// done. The iterations are independent, so the processor overlaps their
// lookups and multiplications.
func windowPass(tab []windowEntry, limit uint64, capLess uint32, jobs []windowJob, done []windowJob) ([]windowJob, []windowJob) {
	const mask = 1<<windowBits - 1
	w := 0
	for _, j := range jobs {
		e := &tab[j.lo&mask]
		if int64(e.least) < j.slack || j.hi > limit || j.i > capLess {
			done = append(done, j)
			continue
		}
		ph, pl := bits.Mul64(j.lo>>windowBits|j.hi<<(64-windowBits), e.mul)
		ph += j.hi >> windowBits * e.mul
		var c uint64
		j.lo, c = bits.Add64(pl, e.d, 0)
		j.hi = ph + c
		j.slack += int64(e.dslack)
		j.i += windowBits
		jobs[w] = j
		w++
	}
	return jobs[:w], done
}

// windowFinish follows a job handed on by windowPass one step at a time,
// through at most one window, comparing the value with n wherever the
// slack says a drop is possible. It returns the stopping time, or 0 with
// the job moved on as far as it went, for searchFrom to finish.
func (r *rules) windowFinish(j *windowJob, cap uint32) uint32 {
	if j.hi > r.winLim || j.i+windowBits > cap {
		return 0
	}
	hi, lo, slack, i := j.hi, j.lo, j.slack, j.i
	half := (r.a - 1) / 2
	inc := uint64(r.m.B+1) / 2 // b > 0
	odd := int64(r.winL)
	for range windowBits {
		m := -(lo & 1)
		th, tl := bits.Mul64(lo, half)
		th += hi * half
		var c uint64
		tl, c = bits.Add64(tl, inc, 0)
		th += c
		lo, c = bits.Add64(lo>>1|hi<<63, tl&m, 0)
		hi = hi>>1 + th&m + c
		slack += 1<<slackShift - odd&int64(m)
		i++
		if slack > 0 && hi == 0 && lo < j.n {
			return i
		}
	}
	j.hi, j.lo, j.slack, j.i = hi, lo, slack, i
	return 0
}
