package emit

import (
	"context"
	"fmt"
	"math/big"
	"testing"

	"descent/cert"
)

// BenchmarkRangeSearch times emit.Range alone (no sieve file, no root
// check) over 2^(k+2) numbers from 2^60 on a 3n+1 sieve with k = 32 or
// 34, with and without joins and predecessor rules, on one worker; the
// numbers covered per CPU-second are what the README's table quotes.
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
				b.Run(fmt.Sprintf("k=%d/joins=%v/rules=%v", k, joins, rules), func(b *testing.B) {
					var out *RangeResult
					for range b.N {
						if out, err = Range(context.Background(), f, p, RangeOptions{Workers: 1}); err != nil {
							b.Fatal(err)
						}
					}
					rate := float64(span.Int64()) * float64(b.N) / b.Elapsed().Seconds()
					b.ReportMetric(rate, "numbers/s")
					b.ReportMetric(rate/(1<<32), "2^32/s")
					searched, _ := new(big.Rat).SetFrac(out.Header.Totals.Search, span).Float64()
					b.ReportMetric(searched*100, "%searched")
				})
			}
		}
	}
}

type discardAt struct{}

func (discardAt) WriteAt(p []byte, _ int64) (int, error) { return len(p), nil }
