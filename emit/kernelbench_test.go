package emit

import (
	"runtime"
	"syscall"
	"testing"
	"time"

	"descent/cert"
)

type survivorList struct {
	res []uint64
	s   []int
	tk  []exact
}

func (l *survivorList) closed(uint64, int) {}
func (l *survivorList) survivor(res uint64, s int, tk exact) {
	l.res, l.s, l.tk = append(l.res, res), append(l.s, s), append(l.tk, tk)
}

// searchJobs returns the numbers 2^60 + r + q*2^k (q < 4) of the first
// survivor classes r of the 3n+1 sieve mod 2^k, jumped k steps.
func searchJobs(tb testing.TB, k, stubs int) (*rules, []windowJob) {
	r, err := newRules(cert.Collatz, k, k)
	if err != nil {
		tb.Fatal(err)
	}
	d := cert.SplitDepth(k)
	var res []uint64
	gen := encoder{r: r, end: d, tb: -1, tally: newTally(k)}
	gen.stub = func(x uint64, _ int, _ uint64) error { res = append(res, x); return nil }
	if err := gen.top(0, 0, 0, 0); err != nil {
		tb.Fatal(err)
	}
	var l survivorList
	for _, x := range res[:stubs] {
		sv, v := r.stubStart(x, d)
		r.leaves(d, sv, v, x, k, &l)
	}
	var jobs []windowJob
	for i, x := range l.res {
		for q := uint64(0); q < 4; q++ {
			n := 1<<60 + x + q<<k
			y, _ := r.powU[l.s[i]].mul64(n >> k)
			y, _ = y.add(l.tk[i].u)
			jobs = append(jobs, windowJob{n: n, hi: y.hi, lo: y.lo, i: uint32(k), slack: int64(k)<<slackShift - int64(l.s[i])*r.winL})
		}
	}
	return r, jobs
}

// threadCPU is the CPU time of the calling thread (user + system).
func threadCPU() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(1 /* RUSAGE_THREAD */, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func BenchmarkSearchKernel(b *testing.B) {
	r, jobs := searchJobs(b, 32, 8)
	b.Run("jump2", func(b *testing.B) {
		jj := make([]jumpJob, len(jobs))
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
		c0 := threadCPU()
		for range b.N {
			for i, j := range jobs {
				jj[i] = jumpJob{n: j.n, hi: j.hi, lo: j.lo, i: j.i}
			}
			for c := 0; c < len(jj); c += flushSize {
				searchJump2(r.jump, r.jumpLim, jj[c:min(c+flushSize, len(jj))], 100000)
			}
		}
		b.ReportMetric(float64((threadCPU()-c0).Nanoseconds())/float64(b.N*len(jobs)), "cpu-ns/number")
	})
	b.Run("window", func(b *testing.B) {
		work := make([]windowJob, 0, len(jobs))
		done := make([]windowJob, 0, len(jobs))
		var sum uint64
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
		c0 := threadCPU()
		for range b.N {
			for c := 0; c < len(jobs); c += flushSize {
				work = append(work[:0], jobs[c:min(c+flushSize, len(jobs))]...)
				done = done[:0]
				for len(work) > 0 {
					work, done = windowPass(r.win, r.winLim, 100000-windowBits, work, done)
				}
				for _, j := range done {
					sum += uint64(r.windowFinish(&j, 100000))
				}
			}
		}
		b.ReportMetric(float64((threadCPU()-c0).Nanoseconds())/float64(b.N*len(jobs)), "cpu-ns/number")
	})
}

func BenchmarkSearchKernelParts(b *testing.B) {
	r, jobs := searchJobs(b, 32, 8)
	work := make([]windowJob, 0, len(jobs))
	done := make([]windowJob, 0, len(jobs))
	b.Run("passes", func(b *testing.B) {
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
		c0 := threadCPU()
		passes := 0
		for range b.N {
			work = append(work[:0], jobs...)
			done = done[:0]
			for len(work) > 0 {
				work, done = windowPass(r.win, r.winLim, 100000-windowBits, work, done)
				passes++
			}
		}
		b.ReportMetric(float64((threadCPU()-c0).Nanoseconds())/float64(b.N*len(jobs)), "cpu-ns/number")
		b.ReportMetric(float64(passes)/float64(b.N), "passes")
	})
	fin := append([]windowJob(nil), done...)
	b.Run("finish", func(b *testing.B) {
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
		c0 := threadCPU()
		var sum uint64
		fails := 0
		for range b.N {
			for _, j := range fin {
				s := r.windowFinish(&j, 100000)
				sum += uint64(s)
				if s == 0 {
					fails++
				}
			}
		}
		b.ReportMetric(float64((threadCPU()-c0).Nanoseconds())/float64(b.N*len(jobs)), "cpu-ns/number")
		b.ReportMetric(float64(fails)/float64(b.N), "fails")
	})
}
