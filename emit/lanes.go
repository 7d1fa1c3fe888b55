package emit

import "math/bits"

// laneLimit keeps lane values below 2^124, far from 2^128, so that no step
// can overflow (a step at most multiplies by 3/2 and adds 1).
const laneLimit = 1 << 60

// job is one number of a survivor class for the lane search: n and
// x = T^k(n), with x below 2^124.
type job struct {
	n      uint64
	hi, lo uint64
	off    uint64
}

// lanes runs the search of 3n+1 on four numbers at once. The step of one
// number is a chain of dependent instructions; four independent chains
// keep the core busy while each waits on its own. Each lane checks its own
// number after every step and, when it drops below itself, reports its
// stopping time and takes the next job; a lane that reaches the cap or the
// value limit reports sigma 0, and the caller finishes that number by the
// general path.
type lanes struct {
	jobs []job
	next int
	k    uint32
	cap  uint32
	done func(j *job, sigma uint32)
}

// take returns the state of the next job, or an empty lane: n = 0 and a
// zero value, which steps to zero and never drops.
func (s *lanes) take() (hi, lo, n uint64, i uint32, j int) {
	if s.next == len(s.jobs) {
		return 0, 0, 0, 0, -1
	}
	j = s.next
	s.next++
	x := &s.jobs[j]
	return x.hi, x.lo, x.n, s.k, j
}

// finish reports lane j at step i and says whether the lane was busy.
func (s *lanes) finish(hi, lo, n uint64, i uint32, j int) bool {
	if j < 0 {
		return false
	}
	if i > s.cap || hi >= laneLimit {
		s.done(&s.jobs[j], 0)
	} else {
		s.done(&s.jobs[j], i)
	}
	return true
}

func search3Lanes(jobs []job, k, cap uint32, done func(j *job, sigma uint32)) {
	s := &lanes{jobs: jobs, k: k, cap: cap, done: done}
	h0, l0, n0, i0, j0 := s.take()
	h1, l1, n1, i1, j1 := s.take()
	h2, l2, n2, i2, j2 := s.take()
	h3, l3, n3, i3, j3 := s.take()
	active := min(4, len(jobs))
	// The value is at least n when a job starts (x = T^k(n) >= n for a
	// survivor above the small bound), so a lane is checked after a step.
	for active > 0 {
		h0, l0 = step3(h0, l0)
		h1, l1 = step3(h1, l1)
		h2, l2 = step3(h2, l2)
		h3, l3 = step3(h3, l3)
		i0, i1, i2, i3 = i0+1, i1+1, i2+1, i3+1
		if (h0 == 0 && l0 < n0) || h0 >= laneLimit || i0 > cap {
			if !s.finish(h0, l0, n0, i0, j0) {
				i0 = 0 // an empty lane only counts steps
			} else if h0, l0, n0, i0, j0 = s.take(); j0 < 0 {
				active--
			}
		}
		if (h1 == 0 && l1 < n1) || h1 >= laneLimit || i1 > cap {
			if !s.finish(h1, l1, n1, i1, j1) {
				i1 = 0 // an empty lane only counts steps
			} else if h1, l1, n1, i1, j1 = s.take(); j1 < 0 {
				active--
			}
		}
		if (h2 == 0 && l2 < n2) || h2 >= laneLimit || i2 > cap {
			if !s.finish(h2, l2, n2, i2, j2) {
				i2 = 0 // an empty lane only counts steps
			} else if h2, l2, n2, i2, j2 = s.take(); j2 < 0 {
				active--
			}
		}
		if (h3 == 0 && l3 < n3) || h3 >= laneLimit || i3 > cap {
			if !s.finish(h3, l3, n3, i3, j3) {
				i3 = 0 // an empty lane only counts steps
			} else if h3, l3, n3, i3, j3 = s.take(); j3 < 0 {
				active--
			}
		}
	}
}

// step3 is one step of 3n+1 on a 128-bit value: (x >> 1) + (x + 1) when x
// is odd, x >> 1 when even.
func step3(hi, lo uint64) (uint64, uint64) {
	odd := -(lo & 1)
	tl, c := bits.Add64(lo, 1, 0)
	th := hi + c
	lo, c = bits.Add64(lo>>1|hi<<63, tl&odd, 0)
	return hi>>1 + th&odd + c, lo
}
