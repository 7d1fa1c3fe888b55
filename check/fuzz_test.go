package check

import (
	"bytes"
	"context"
	"math/big"
	"reflect"
	"testing"

	"descent/cert"
	"descent/check/kernel"
	"descent/emit"
	"descent/internal/certtest"
)

// The fast paths of form (b), fuzzed against the kernel: on the same
// bytes, the default checker and the kernel alone give the same verdict
// and reason; on the same block, the fast search and the kernel derive
// the same summary. Each runs alone, with a small budget so that a
// mutated header that claims much work is refused at once:
//
//	go test ./check -run '^$' -fuzz '^FuzzPipelineAgainstKernel$' -parallel 1 -fuzztime 10m -fuzzminimizetime 5s
//	go test ./check -run '^$' -fuzz '^FuzzRangeAgainstKernel$'    -parallel 1 -fuzztime 10m -fuzzminimizetime 5s
//	go test ./check -run '^$' -fuzz '^FuzzSearchAgainstKernel$'   -parallel 1 -fuzztime 10m -fuzzminimizetime 5s
const fuzzBudget = 1 << 22

// fixture is a small certificate the fuzz targets start from, emitted
// with a cap of 1000 steps so that each check takes milliseconds, and the
// sieve a range rests on.
type fixture struct {
	b     []byte
	sieve *fixture
	h     *cert.SieveHeader
	root  cert.Hash
}

func emitSieve(t testing.TB, m cert.Map, k int, joins bool, shard *emit.Shard) *fixture {
	var f certtest.MemFile
	res, err := emit.Sieve(context.Background(), &f, emit.SieveParams{Map: m, K: k, J: k, Cap: 1000, Joins: joins}, emit.Options{Workers: 1, Shard: shard})
	if err != nil {
		t.Fatal(err)
	}
	return &fixture{b: f.B, h: res.Header, root: res.Root}
}

func emitRange(t testing.TB, s *fixture, lo *big.Int, span int64, e int, rules bool) (*fixture, error) {
	p := emit.RangeParams{Sieve: s.h, SieveRoot: s.root, Lo: lo, Hi: new(big.Int).Add(lo, big.NewInt(span)), E: s.h.K + e, Cap: 1000}
	if rules {
		p.Rules = emit.AutoRules(s.h.Map)
	}
	var f certtest.MemFile
	if _, err := emit.Range(context.Background(), &f, p, emit.RangeOptions{Workers: 1}); err != nil {
		return nil, err
	}
	return &fixture{b: f.B, sieve: s}, nil
}

// fixtures: sieves of 3n+1 (with and without joins), 3n-1 and 5n+1, a
// shard, and ranges on each sieve.
func fixtures(t testing.TB) (sieves, ranges []*fixture) {
	sieves = []*fixture{emitSieve(t, cert.Collatz, 10, false, nil), emitSieve(t, cert.Collatz, 8, true, nil),
		emitSieve(t, cert.Map{A: 3, B: -1}, 10, false, nil), emitSieve(t, cert.Map{A: 5, B: 1}, 10, false, nil)}
	for i, s := range sieves {
		span := int64(3000)
		if s.h.Map.A == 5 {
			span = 200 // most of these numbers climb to the ceiling: slow to decide
		}
		r, err := emitRange(t, s, new(big.Int).Lsh(big.NewInt(1), uint(20*i)), span, i%3, i%2 == 0)
		if err != nil {
			t.Fatal(err)
		}
		ranges = append(ranges, r)
	}
	return append(sieves, emitSieve(t, cert.Collatz, 10, false, &emit.Shard{I: 1, N: 3})), ranges
}

// withSieve checks b with its sieve given, by the default checker and the
// kernel alone, and requires the same verdict and reason.
func withSieve(t testing.TB, b []byte, o Options, sieve []byte) {
	ko := o.Options
	if sieve != nil {
		o.Sieve = func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
			return RangeSieve(bytes.NewReader(sieve), int64(len(sieve)), "the sieve", named, Options{})
		}
		ko.Sieve = func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
			return kernel.RangeSieve(bytes.NewReader(sieve), int64(len(sieve)), "the sieve", named, kernel.Options{})
		}
	}
	fast := Check(bytes.NewReader(b), int64(len(b)), o)
	ref := kernel.Check(bytes.NewReader(b), int64(len(b)), ko)
	if reason(fast) != reason(ref) {
		t.Fatalf("the default checker says %s (%v), the kernel alone %s (%v)", reason(fast), fast.Err(), reason(ref), ref.Err())
	}
}

// FuzzPipelineAgainstKernel: sieve certificates, whole and shards, checked
// by the parallel pipeline with the memo and by the kernel alone.
func FuzzPipelineAgainstKernel(f *testing.F) {
	sieves, _ := fixtures(f)
	for _, s := range sieves {
		f.Add(s.b, uint8(2))
	}
	f.Fuzz(func(t *testing.T, b []byte, workers uint8) {
		o := Options{Workers: 1 + int(workers%4)}
		o.Budget = fuzzBudget
		withSieve(t, b, o, nil)
	})
}

// FuzzRangeAgainstKernel: range certificates checked by the fast search and
// by the kernel alone, on their sieve, in full or as an audit.
func FuzzRangeAgainstKernel(f *testing.F) {
	sieves, ranges := fixtures(f)
	for i, r := range ranges {
		f.Add(r.b, uint8(i))
	}
	f.Fuzz(func(t *testing.T, b []byte, sieve uint8) {
		o := Options{Workers: 2}
		o.Budget, o.Draw = fuzzBudget, Sample(int(sieve/4%3), "fuzz")
		withSieve(t, b, o, sieves[int(sieve)%len(ranges)].b)
	})
}

// FuzzSearchAgainstKernel: ranges written by the emitter anywhere below
// 2^128 and beyond, with and without rules, on sieves with and without
// joins; every block is derived by the fast search and by the kernel, and
// the two summaries must be equal.
func FuzzSearchAgainstKernel(f *testing.F) {
	f.Add(uint8(0), uint64(1), uint8(0), uint16(3000), uint8(0), false)
	f.Add(uint8(1), uint64(1)<<40, uint8(0), uint16(60000), uint8(2), true)
	f.Add(uint8(2), uint64(12345), uint8(70), uint16(500), uint8(1), true)
	f.Add(uint8(3), ^uint64(0)-1000, uint8(0), uint16(2000), uint8(0), false)
	sieves, _ := fixtures(f)
	sieves = sieves[:4] // not the shard
	f.Fuzz(func(t *testing.T, which uint8, lo64 uint64, shift uint8, span uint16, e uint8, rules bool) {
		s := sieves[int(which)%len(sieves)]
		lo := new(big.Int).Lsh(new(big.Int).SetUint64(max(lo64, 1)), uint(shift%80))
		r, err := emitRange(t, s, lo, 1+int64(span), int(e%4), rules)
		if err != nil {
			t.Skip(err) // more undecided numbers than a block lists: not a certificate
		}
		o := kernel.Options{Sieve: func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
			return kernel.RangeSieve(bytes.NewReader(s.b), int64(len(s.b)), "the sieve", named, kernel.Options{})
		}}
		d := &deriver{workers: 2}
		o.Fast = &kernel.Fast{Derive: func(rg *kernel.Range, i int, m *kernel.Meter) *kernel.Block {
			fast := d.derive(rg, i, m)
			if ref := rg.Derive(i, kernel.NewMeter(big.NewInt(1<<40))); !reflect.DeepEqual(summary(ref), summary(fast)) {
				t.Fatalf("block %d of [%v, +%d) on %v: the fast search gives %v, the kernel %v", i, lo, span, s.h.Map, summary(fast), summary(ref))
			}
			return fast
		}}
		if res := kernel.Check(bytes.NewReader(r.b), int64(len(r.b)), o); res.Failure != nil {
			t.Fatalf("the emitter's range [%v, +%d) on %v fails: %v", lo, span, s.h.Map, res.Failure)
		}
	})
}

// summary writes a block as text, so that nil and empty lists compare equal.
func summary(b *kernel.Block) []string {
	s := &b.Summary
	out := []string{}
	for _, x := range append(s.Counts[:], s.Rules...) {
		out = append(out, x.String())
	}
	out = append(out, s.Sum.String(), big.NewInt(int64(s.MaxSigma)).String())
	if s.MaxAt != nil {
		out = append(out, s.MaxAt.String())
	}
	for _, p := range s.Records {
		out = append(out, p.N.String()+":"+big.NewInt(int64(p.Sigma)).String())
	}
	for _, c := range s.Cycles {
		out = append(out, "cycle "+c.Min.String()+":"+c.Count.String())
	}
	for _, n := range b.Undecided {
		out = append(out, "undecided "+n.String())
	}
	return out
}
