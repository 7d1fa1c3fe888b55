package main

import (
	"context"
	"fmt"
	"math/big"
	"os"
	"path/filepath"
	"testing"

	"descent/cert"
	"descent/check"
	"descent/emit"
)

// BenchmarkCheckRange times a full check (the sieve, then every block) of
// a range of 2^(k+2) numbers from 2^60, in CPU seconds, on sieves of
// k = 32 and 34, plain and with joins and predecessor rules, with one
// worker and two:
//
//	go test ./cmd/descent -run '^$' -bench CheckRange -benchtime 1x -count 5
//
// The whole run of the case is measured as commands (README,
// "Speed and size"):
//
//	/usr/bin/time -v descent check -sieve s34j.dcert r36.dcert
func BenchmarkCheckRange(b *testing.B) {
	for _, k := range []int{32, 34} {
		for _, reduced := range []bool{false, true} {
			dir := b.TempDir()
			sieve, rng := filepath.Join(dir, "sieve.dcert"), filepath.Join(dir, "range.dcert")
			res := emitSieve(b, k, sieve, reduced)
			lo := new(big.Int).Lsh(big.NewInt(1), 60)
			span := new(big.Int).Lsh(big.NewInt(1), uint(k+2))
			p := emit.RangeParams{Sieve: res.Header, SieveRoot: res.Root, Lo: lo, Hi: new(big.Int).Add(lo, span), E: k + 4}
			if reduced {
				p.Rules = emit.AutoRules(cert.Collatz)
			}
			f, err := os.Create(rng)
			if err != nil {
				b.Fatal(err)
			}
			if _, err := emit.Range(context.Background(), f, p, emit.RangeOptions{}); err != nil {
				b.Fatal(err)
			}
			f.Close()
			for _, w := range []int{1, 2} {
				name := fmt.Sprintf("k=%d/joins+rules=%v/workers=%d", k, reduced, w)
				b.Run(name, func(b *testing.B) {
					start := cpuTime()
					for range b.N {
						if rep := newChecker(check.Options{Workers: w}, sieve, false).file(rng); !rep.Valid {
							b.Fatal(rep.Err())
						}
					}
					reportCPU(b, float64(span.Int64()), cpuTime()-start)
					// Wall time, for the scaling from one worker to two.
					b.ReportMetric(float64(span.Int64())*float64(b.N)/b.Elapsed().Seconds(), "numbers/s")
				})
			}
		}
	}
}
