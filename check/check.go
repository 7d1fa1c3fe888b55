// Package check is descent's default checker: the trusted kernel
// (package check/kernel, which decides every verdict) with fast paths
// plugged into it. It imports only the standard library and BLAKE2b,
// never the packages that write certificates. No fast path is trusted
// blindly; each takes one of two forms:
//
//   - (a) a table the kernel validates entry by entry before use, so that a
//     bug in it costs speed, never soundness: the sieve memo over
//     (s, v mod 2^8) (memo.go), whose entries the kernel walks class by
//     class and keeps only if true; and the range search's table of
//     jumpBits steps at once (jump.go), each entry re-derived by
//     kernel.Params.ValidJump before use;
//   - (b) code that cannot be validated that way, fuzzed against the kernel
//     for the same verdict, reason and derived values: the parallel
//     pipeline of chunk records (pipeline.go, FuzzPipelineAgainstKernel)
//     and the block search in 128-bit arithmetic spread over the stubs in
//     parallel (rangesearch.go, FuzzSearchAgainstKernel and
//     FuzzRangeAgainstKernel).
//
// The reader's choices that make no claim true or false are this
// package's too (audit.go): the blocks an audit draws, with its seed, and
// the records -part names. descent check -reference runs the kernel alone
// with them.
package check

import (
	"io"
	"math/big"

	"descent/check/kernel"
)

// Options tune a check. None changes the verdict.
type Options struct {
	kernel.Options
	Workers int // records or stubs worked on at once; 0 means GOMAXPROCS
}

// fast plugs this package's fast paths into the kernel's options.
func (o Options) fast() kernel.Options {
	ko := o.Options
	d := &deriver{workers: o.Workers}
	ko.Fast = &kernel.Fast{Memo: newMemo, Run: pipeline(o.Workers), Derive: d.derive}
	return ko
}

// Check checks the certificate of size bytes in r.
func Check(r io.ReaderAt, size int64, o Options) *kernel.Result {
	return kernel.Check(r, size, o.fast())
}

// Part checks part of a whole certificate against a published root:
// "P", the record P, or "i/N", share i of N of the records.
func Part(r io.ReaderAt, size int64, part string, root kernel.Hash, o Options) *kernel.Result {
	span, fl := ParsePart(part)
	if fl != nil {
		return &kernel.Result{Mode: kernel.ModePart, Failure: fl}
	}
	return kernel.Part(r, size, span, root, o.fast())
}

// RangeSieve checks the sieve certificate in r as the one a range names.
func RangeSieve(r io.ReaderAt, size int64, name string, named kernel.Hash, o Options) (*kernel.Sieve, *kernel.Failure) {
	return kernel.RangeSieve(r, size, name, named, o.fast())
}

// deriver derives blocks with the search of rangesearch.go, set up once
// per range.
type deriver struct {
	workers int
	r       *kernel.Range
	s       *searcher
}

func (d *deriver) derive(r *kernel.Range, i int, m *kernel.Meter) *kernel.Block {
	if d.r != r {
		d.r, d.s = r, newSearcher(r)
	}
	s := *d.s
	s.m = m
	return s.derive(i, defaultWorkers(d.workers))
}

// FatesBelow derives what each number below lo reaches by the fate rule
// when lo <= 2 (then there is at most the number 1), so that a range from
// 1 or 2 can name every cycle reached below hi; nil otherwise, or if it
// would take more than 2^24 steps.
func FatesBelow(m kernel.Map, C uint32, W int, lo *big.Int) []kernel.Fate {
	if lo == nil || lo.Cmp(big.NewInt(2)) > 0 {
		return nil
	}
	p, meter, out := kernel.NewParams(m, 1), kernel.NewMeter(big.NewInt(1<<24)), []kernel.Fate{}
	for n := int64(1); n < lo.Int64(); n++ {
		if out = append(out, p.Fate(big.NewInt(n), C, W, meter)); meter.Exceeded() {
			return nil
		}
	}
	return out
}
