package main

import (
	"context"
	"math"
	"math/big"
	"math/bits"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"descent/cert"
	"descent/emit"
)

// Census benchmarks, in CPU seconds (the process's user and system time,
// which other programs on a shared machine do not inflate as they do the
// wall clock):
//
//	go test ./cmd/descent -run '^$' -bench Census -benchtime 1x -count 5
//
// The whole run of [1, 2^30) is measured as a command (README, "Census
// certificates"):
//
//	/usr/bin/time -v descent emit census -from 1 -to 2^30 -o c.dcert

func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// reportCPU reports the numbers covered per CPU-second over the b.N runs
// that took cpu, and the CPU seconds per run.
func reportCPU(b *testing.B, numbers float64, cpu time.Duration) {
	rate := numbers * float64(b.N) / cpu.Seconds()
	b.ReportMetric(rate, "numbers/cpu-s")
	b.ReportMetric(math.Log2(rate), "log2(numbers/cpu-s)")
	b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
}

// BenchmarkCensus emits the census of [1, 2^26) with one worker and with
// two, and of one block far from 1, [2^40, 2^40+2^24), alone.
func BenchmarkCensus(b *testing.B) {
	pow := func(e uint) *big.Int { return new(big.Int).Lsh(big.NewInt(1), e) }
	for _, c := range []struct {
		name    string
		lo, hi  *big.Int
		workers int
	}{
		{"from=1/to=2^26/workers=1", big.NewInt(1), pow(26), 1},
		{"from=1/to=2^26/workers=2", big.NewInt(1), pow(26), 2},
		{"from=2^40/to=2^40+2^24/workers=2", pow(40), new(big.Int).Add(pow(40), pow(24)), 2},
	} {
		b.Run(c.name, func(b *testing.B) {
			path := filepath.Join(b.TempDir(), "census.dcert")
			cpu0 := cpuTime()
			for range b.N {
				f, err := os.Create(path)
				if err != nil {
					b.Fatal(err)
				}
				p := emit.CensusParams{Map: cert.Collatz, Lo: c.lo, Hi: c.hi}
				if _, err := emit.Census(context.Background(), f, p, emit.CensusOptions{Workers: c.workers}); err != nil {
					b.Fatal(err)
				}
				f.Close()
			}
			n, _ := new(big.Float).SetInt(new(big.Int).Sub(c.hi, c.lo)).Float64()
			reportCPU(b, n, cpuTime()-cpu0)
		})
	}
}

// BenchmarkCensusPlainLoop is the baseline of issue 12: follow every n in
// [2^29, 2^29+2^20) to 1 in 64 bits, counting steps and odd steps and
// keeping the peak, one number after the other.
func BenchmarkCensusPlainLoop(b *testing.B) {
	lo := uint64(1) << 29
	var steps, peaks uint64
	cpu0 := cpuTime()
	for range b.N {
		for n := lo; n < lo+1<<20; n++ {
			x, d, h, peak := n, uint64(0), uint64(0), n
			for x != 1 {
				if x&1 == 0 {
					x >>= 1
				} else {
					x = 3*x + 1
					peak = max(peak, x)
					h++
				}
				d++
			}
			steps += d
			peaks += uint64(bits.Len64(peak)) + h // kept, so that the loop does all its work
		}
	}
	reportCPU(b, 1<<20, cpuTime()-cpu0)
	b.ReportMetric(float64(steps)/float64(b.N)/(1<<20), "standard-steps/number")
	if peaks == 0 {
		b.Fatal("no peaks")
	}
}
