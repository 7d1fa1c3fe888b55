package main

import (
	"context"
	"fmt"
	"math/big"
	"math/bits"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	"descent/cert"
	"descent/check"
	"descent/emit"
)

// Benchmarks of whole runs: emit and check a 3n+1 sieve certificate at
// k = 24..36, each reporting ns per trie node and bytes per survivor, and
// the plain single-threaded depth-first count of survivors (no encoding, no
// hashing) that the speed targets are measured against.
//
//	go test ./cmd/descent -run '^$' -bench . -benchtime 5x -count 5

var benchK = []int{24, 28, 32, 36}

// trieNodes is the number of classes in the trie down to depth j, open or
// closed: the root, and two children for every class open above depth j.
// The open classes at each depth follow from the header's closing counts.
func trieNodes(h *cert.SieveHeader) float64 {
	nodes, open := 1.0, 1.0
	for t := 1; t <= h.J; t++ {
		nodes += 2 * open
		open = 2*open - float64(h.ClosedAt[t-1])
	}
	return nodes
}

type plain struct {
	j         int
	pow       []uint64
	closes    []int
	nodes     uint64
	survivors uint64
}

func newPlain(j int) *plain {
	p := &plain{j: j}
	x := big.NewInt(1)
	for s := 0; s <= j; s++ {
		p.pow = append(p.pow, x.Uint64())
		p.closes = append(p.closes, x.BitLen())
		x.Mul(x, big.NewInt(3))
	}
	return p
}

// walk is the plain depth-first count: one call per open class.
func (p *plain) walk(t, s int, v uint64) {
	p.nodes++
	if t == p.j {
		p.survivors++
		return
	}
	for c := uint64(0); c < 2; c++ {
		vc := v + c*p.pow[s]
		if vc&1 == 0 {
			if p.closes[s] <= t+1 {
				p.nodes++ // a closed leaf
				continue
			}
			p.walk(t+1, s, vc>>1)
		} else {
			p.walk(t+1, s+1, (3*vc+1)>>1)
		}
	}
}

func BenchmarkPlainCount(b *testing.B) {
	for _, k := range benchK {
		b.Run(fmt.Sprintf("k=%d", k), func(b *testing.B) {
			var p *plain
			for range b.N {
				p = newPlain(k)
				p.walk(0, 0, 0)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(p.nodes), "ns/node")
			b.ReportMetric(float64(p.nodes), "nodes")
			b.ReportMetric(float64(p.survivors), "survivors")
		})
	}
}

func emitFile(b *testing.B, k int, path string) *emit.Result { return emitSieve(b, k, path, false) }

func emitSieve(b *testing.B, k int, path string, joins bool) *emit.Result {
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	res, err := emit.Sieve(context.Background(), f, emit.SieveParams{Map: cert.Collatz, K: k, J: k, Joins: joins}, emit.Options{})
	if err != nil {
		b.Fatal(err)
	}
	return res
}

func BenchmarkEmit(b *testing.B) {
	for _, k := range benchK {
		b.Run(fmt.Sprintf("k=%d", k), func(b *testing.B) {
			path := filepath.Join(b.TempDir(), "sieve.dcert")
			var res *emit.Result
			for range b.N {
				res = emitFile(b, k, path)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/trieNodes(res.Header), "ns/node")
			b.ReportMetric(8*float64(res.Size)/float64(res.Header.Survivors), "bits/survivor")
		})
	}
}

// BenchmarkJoins emits and checks sieves with and without joins at k = 28
// and 32 on all cores; the joins' cost is the ratio of the medians.
//
//	go test ./cmd/descent -run '^$' -bench Joins -benchtime 5x -count 5
func BenchmarkJoins(b *testing.B) {
	for _, k := range []int{28, 32} {
		for _, joins := range []bool{false, true} {
			name := fmt.Sprintf("k=%d/plain", k)
			if joins {
				name = fmt.Sprintf("k=%d/joins", k)
			}
			path := filepath.Join(b.TempDir(), "sieve.dcert")
			b.Run(name+"/emit", func(b *testing.B) {
				var res *emit.Result
				for range b.N {
					res = emitSieve(b, k, path, joins)
				}
				b.ReportMetric(8*float64(res.Size)/float64(res.Header.Survivors), "bits/survivor")
				b.ReportMetric(float64(res.Header.Joined)/float64(res.Header.Survivors), "joined/survivor")
			})
			b.Run(name+"/check", func(b *testing.B) {
				for range b.N {
					if rep := newChecker(check.Options{}, "", false).file(path); !rep.Valid {
						b.Fatal(rep.Err())
					}
				}
			})
		}
	}
}

func BenchmarkCheck(b *testing.B) {
	for _, k := range benchK {
		b.Run(fmt.Sprintf("k=%d", k), func(b *testing.B) {
			path := filepath.Join(b.TempDir(), "sieve.dcert")
			res := emitFile(b, k, path)
			b.ResetTimer()
			for range b.N {
				if rep := newChecker(check.Options{}, "", false).file(path); !rep.Valid {
					b.Fatal(rep.Err())
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/trieNodes(res.Header), "ns/node")
		})
	}
}

// BenchmarkPlainLoop is the baseline for range searches: iterate every n
// from 2^60 until it drops below itself, no sieve, exact in 128 bits.
func BenchmarkPlainLoop(b *testing.B) {
	n := uint64(1) << 60
	var steps uint64
	for range b.N {
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
		n++
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "numbers/s")
	b.ReportMetric(float64(steps)/float64(b.N), "steps/number")
}

// BenchmarkRange covers 2^(k+2) numbers from 2^60 with a k = 24 or 32
// sieve (blocks of 2^(k+4)), on one core and on all of them.
//
//	go test ./cmd/descent -run '^$' -bench Range -benchtime 1x -count 5
func BenchmarkRange(b *testing.B) {
	for _, k := range []int{24, 32} {
		dir := b.TempDir()
		sieve := filepath.Join(dir, "sieve.dcert")
		res := emitFile(b, k, sieve)
		lo := new(big.Int).Lsh(big.NewInt(1), 60)
		span := new(big.Int).Lsh(big.NewInt(1), uint(k+2))
		for _, w := range []int{1, 2} {
			b.Run(fmt.Sprintf("k=%d/workers=%d", k, w), func(b *testing.B) {
				p := emit.RangeParams{Sieve: res.Header, SieveRoot: res.Root, Lo: lo, Hi: new(big.Int).Add(lo, span), E: k + 4}
				for range b.N {
					f, err := os.Create(filepath.Join(dir, "range.dcert"))
					if err != nil {
						b.Fatal(err)
					}
					if _, err := emit.Range(context.Background(), f, p, emit.RangeOptions{Workers: w}); err != nil {
						b.Fatal(err)
					}
					f.Close()
				}
				perCore := float64(span.Int64()) * float64(b.N) / b.Elapsed().Seconds() / float64(w)
				b.ReportMetric(perCore, "numbers/core-s")
				b.ReportMetric(perCore/(1<<32), "2^32/core-s")
			})
		}
	}
}

// BenchmarkRangeRules is BenchmarkRange on all cores with and without the
// predecessor rules of emit.AutoRules: the covered-numbers rate of each.
//
//	go test ./cmd/descent -run '^$' -bench RangeRules -benchtime 1x -count 5
func BenchmarkRangeRules(b *testing.B) {
	for _, k := range []int{24, 32} {
		dir := b.TempDir()
		sieve := filepath.Join(dir, "sieve.dcert")
		res := emitFile(b, k, sieve)
		lo := new(big.Int).Lsh(big.NewInt(1), 60)
		span := new(big.Int).Lsh(big.NewInt(1), uint(k+2))
		for _, rules := range []bool{false, true} {
			name := fmt.Sprintf("k=%d/rules=none", k)
			p := emit.RangeParams{Sieve: res.Header, SieveRoot: res.Root, Lo: lo, Hi: new(big.Int).Add(lo, span), E: k + 4}
			if rules {
				name = fmt.Sprintf("k=%d/rules=auto", k)
				p.Rules = emit.AutoRules(res.Header.Map)
			}
			b.Run(name, func(b *testing.B) {
				var out *emit.RangeResult
				for range b.N {
					f, err := os.Create(filepath.Join(dir, "range.dcert"))
					if err != nil {
						b.Fatal(err)
					}
					if out, err = emit.Range(context.Background(), f, p, emit.RangeOptions{}); err != nil {
						b.Fatal(err)
					}
					f.Close()
				}
				w := float64(runtime.GOMAXPROCS(0))
				perCore := float64(span.Int64()) * float64(b.N) / b.Elapsed().Seconds() / w
				b.ReportMetric(perCore, "numbers/core-s")
				b.ReportMetric(perCore/(1<<32), "2^32/core-s")
				searched, ruled := new(big.Int).Set(out.Header.Totals.Search), new(big.Int)
				for _, c := range out.Header.Totals.Rules {
					ruled.Add(ruled, c)
				}
				all := new(big.Int).Add(searched, ruled)
				share, _ := new(big.Rat).SetFrac(ruled, all).Float64()
				b.ReportMetric(share, "ruled/survivor-number")
			})
		}
	}
}

// BenchmarkCheckKernel checks a k = 32 sieve and a range of 2^26 numbers
// from 2^60 on a k = 24 sieve (one block of 2^28), by the default checker
// and by its kernel alone (check -reference); the kernel's slow-down is
// the ratio of the medians.
//
//	go test ./cmd/descent -run '^$' -bench CheckKernel -benchtime 1x -count 5
func BenchmarkCheckKernel(b *testing.B) {
	dir := b.TempDir()
	s32, s24, r26 := filepath.Join(dir, "s32.dcert"), filepath.Join(dir, "s24.dcert"), filepath.Join(dir, "r26.dcert")
	emitFile(b, 32, s32)
	res := emitFile(b, 24, s24)
	lo := new(big.Int).Lsh(big.NewInt(1), 60)
	f, err := os.Create(r26)
	if err != nil {
		b.Fatal(err)
	}
	p := emit.RangeParams{Sieve: res.Header, SieveRoot: res.Root, Lo: lo, Hi: new(big.Int).Add(lo, big.NewInt(1<<26)), E: 28}
	if _, err := emit.Range(context.Background(), f, p, emit.RangeOptions{}); err != nil {
		b.Fatal(err)
	}
	f.Close()
	for _, ref := range []bool{false, true} {
		name := map[bool]string{false: "default", true: "reference"}[ref]
		for _, c := range []struct{ what, file, sieve string }{{"sieve-k=32", s32, ""}, {"range-2^26", r26, s24}} {
			b.Run(c.what+"/"+name, func(b *testing.B) {
				for range b.N {
					if rep := newChecker(check.Options{}, c.sieve, ref).file(c.file); !rep.Valid {
						b.Fatal(rep.Err())
					}
				}
			})
		}
	}
}
