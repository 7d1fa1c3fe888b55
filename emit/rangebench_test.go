package emit

import (
	"context"
	"fmt"
	"math/big"
	"math/bits"
	"syscall"
	"testing"
	"time"

	"descent/cert"
)

// BenchmarkRangeSearch times emit.Range alone (no sieve file, no root
// check) over 2^(k+2) numbers from 2^60 on a 3n+1 sieve with k = 32 or
// 34, with and without joins and predecessor rules, on one worker, by the
// fast paths (two-lane search, rule masks) and, at k = 32, without them
// (slow: each member tried against each rule and searched alone). The
// numbers covered per CPU-second (user and system time of the process)
// are what the README's table quotes.
//
//	go test ./emit -run '^$' -bench RangeSearch -benchtime 1x -count 5
func BenchmarkRangeSearch(b *testing.B) {
	for _, k := range []int{32, 34} {
		for _, joins := range []bool{false, true} {
			var f discardAt
			sres, err := Sieve(context.Background(), f, SieveParams{Map: cert.Collatz, K: k, J: k, Joins: joins}, Options{})
			if err != nil {
				b.Fatal(err)
			}
			for _, rules := range []bool{false, true} {
				lo := pow2(60)
				span := pow2(uint(k + 2))
				p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: lo, Hi: new(big.Int).Add(lo, span)}
				if rules {
					p.Rules = AutoRules(cert.Collatz)
				}
				for _, slow := range []bool{false, true} {
					name := fmt.Sprintf("k=%d/joins=%v/rules=%v", k, joins, rules)
					if slow {
						if k != 32 {
							continue
						}
						name += "/slow"
					}
					b.Run(name, func(b *testing.B) {
						var out *RangeResult
						c0 := processCPU()
						for range b.N {
							if out, err = Range(context.Background(), f, p, RangeOptions{Workers: 1, slow: slow}); err != nil {
								b.Fatal(err)
							}
						}
						cpu := (processCPU() - c0).Seconds() / float64(b.N)
						b.ReportMetric(cpu, "cpu-s/op")
						rate := float64(span.Int64()) / cpu
						b.ReportMetric(rate, "numbers/cpu-s")
						b.ReportMetric(rate/(1<<32), "2^32/cpu-s")
						searched, _ := new(big.Rat).SetFrac(out.Header.Totals.Search, span).Float64()
						b.ReportMetric(searched*100, "%searched")
					})
				}
			}
		}
	}
}

// processCPU is the CPU time of the process so far, user and system: on
// a shared machine it counts this run's work and not the waits.
func processCPU() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

type discardAt struct{}

func (discardAt) WriteAt(p []byte, _ int64) (int, error) { return len(p), nil }

// BenchmarkPlainLoopCPU is the baseline of BenchmarkRangeSearch in the
// same units: iterate every n from 2^60 until it drops below itself, no
// sieve, exact in 128 bits, and report numbers per CPU-second.
//
//	go test ./emit -run '^$' -bench 'PlainLoopCPU' -benchtime 1x -count 5
func BenchmarkPlainLoopCPU(b *testing.B) {
	const count = 1 << 26
	var steps uint64
	c0 := processCPU()
	for range b.N {
		for n := uint64(1) << 60; n < 1<<60+count; n++ {
			hi, lo := uint64(0), n
			for hi != 0 || lo >= n {
				if lo&1 == 0 {
					lo = lo>>1 | hi<<63
					hi >>= 1
				} else { // (3x+1)/2 = x + (x+1)/2
					h1, l1 := hi>>1, lo>>1|hi<<63
					var c uint64
					lo, c = bits.Add64(lo, l1+1, 0)
					hi += h1 + c
				}
				steps++
			}
		}
	}
	cpu := (processCPU() - c0).Seconds() / float64(b.N)
	b.ReportMetric(cpu, "cpu-s/op")
	b.ReportMetric(count/cpu, "numbers/cpu-s")
	b.ReportMetric(float64(steps)/float64(b.N)/count, "steps/number")
}
