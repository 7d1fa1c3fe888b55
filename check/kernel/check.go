package kernel

import (
	"fmt"
	"io"
	"math/big"
	"strconv"
)

// The order of a check (SPEC.md, section 3), one path over the records
// for a whole, a share, a shard and a part.

// Options tune a check. None changes the verdict.
type Options struct {
	Root   *Hash  // if set, the root the certificate must have
	Budget uint64 // the most work, in steps of T (section 4); 0: DefaultBudget
	// Sieve returns the sieve a range rests on, given the root the range
	// names (RangeSieve checks one); nil: none was given.
	Sieve func(named Hash) (*Sieve, *Failure)
	Span  *Span // re-derive only this share of the records
	// Draw draws the blocks of a range an audit re-derives (section 6,
	// "Audits"), given the root and the number of blocks, as indices among
	// them; nil, or a nil Audit: every block. Which blocks are drawn is no
	// part of what makes a re-derived block true, so the caller owns it.
	Draw     func(root Hash, blocks int) (*Audit, error)
	Progress func(done, total int)
	Fast     *Fast // fast paths; nil: the kernel alone
}

// Span is share I of N of a certificate's records (section 7); to Part,
// N = 0 names the record I alone.
type Span struct{ I, N int }

// Fast holds the fast paths package check plugs in, none trusted blindly:
// the walk takes a memo entry only once Params.Subtree verified it, and
// Run and Derive are fuzzed against the kernel's own way (package check).
type Fast struct {
	Memo func(p *Params) Memo // subtrees of the last levels of the trie
	// Run calls work(i), i < n, perhaps at once, and take on the results in
	// the order of i up to the first failure in that order, which it returns.
	Run    func(n int, work func(i int) (*Tally, *Failure), take func(*Tally)) *Failure
	Derive func(r *Range, i int, m *Meter) *Block // as Range.Derive
}

// The modes of a check: what share of a certificate it re-derives.
const ModeFull, ModeAudit, ModeShare, ModePart = "full", "audit", "share", "part"

// Result is what a check read, what it re-derived, and the first failure.
// The headers are as written, shown true only if Failure is nil, and only
// as far as Mode says.
type Result struct {
	File      *File // the header, and the stored tree unless in a part check
	Root      *Hash // the stored root, or in a part check the given one
	Mode      string
	Span      *SpanResult // a share, or the records of a part
	Audit     *Audit
	Undecided []*big.Int // a range's undecided numbers, from its records
	Failure   *Failure
}

// SpanResult is share Index of Of: records First to First+Count-1 of the whole.
type SpanResult struct{ Index, Of, First, Count int }

// Audit names the blocks an audit drew, in the order drawn, from Blocks
// (in a Result: by index in the file); SeedFrom is "reader" or "random".
type Audit struct {
	Blocks         int
	Drawn          []int
	Seed, SeedFrom string
}

// Err returns nil for a certificate found valid and the failure otherwise.
func (r *Result) Err() error {
	if r.Failure == nil {
		return nil
	}
	return r.Failure
}

// Check checks the certificate of size bytes in r.
func Check(r io.ReaderAt, size int64, o Options) *Result { return check(r, size, o, nil, nil) }

// Part checks part of a whole certificate against a published root,
// reading only the header, the audit paths, two offsets per record and
// the records (section 7): the record part.I, or share part.I of part.N.
func Part(r io.ReaderAt, size int64, part Span, root Hash, o Options) *Result {
	o.Span = &part
	return check(r, size, o, &root, nil)
}

// check checks a certificate, or in a part check its records o.Span
// against the root part; with sieve set, it keeps a whole sieve there.
func check(r io.ReaderAt, size int64, o Options, part *Hash, sieve **Sieve) *Result {
	res := &Result{Mode: ModeFull}
	f, fl := open(r, size)
	if res.File = f; fl != nil {
		return res.fail(fl)
	}
	from, upto := 0, f.Records
	if part != nil {
		res.Mode, res.Root, f.root = ModePart, part, part
		i, n := o.Span.I, o.Span.N
		from, upto = i, i+1
		if n > 0 {
			from, upto = spanOf(i, n, f.Records)
		}
		switch end := f.index() + 8*int64(f.Records+1); {
		case f.Shard != nil:
			return res.fail(usage(ReasonPart, "check a shard file whole, without -part", "-part checks a whole certificate against its root, and this file is a shard"))
		case end > size:
			return res.fail(malformed(size, "the file has %d bytes; a certificate of %d records needs %d before its first record", size, f.Records, end))
		case n == 0 && (i < 0 || i >= f.Records):
			return res.fail(usage(ReasonPart, fmt.Sprintf("want a record from 0 to %d", f.Records-1), "-part %d names no record of this certificate", i))
		case n > 0 && (i < 0 || i >= n || n > f.Records):
			return res.fail(usage(ReasonPart, fmt.Sprintf("want i/N with 0 <= i < N <= %d", f.Records), "-part %d/%d names no share of this certificate's %d records", i, n, f.Records))
		}
		res.Span = &SpanResult{First: from, Count: upto - from}
		if ok, fl := f.proves(LeafHash(f.Header), 0); fl != nil {
			return res.fail(fl)
		} else if !ok {
			return res.fail(invalid(ReasonAudit, Where{Claim: "header", Expected: part.String()}, "the header with its audit path does not lead to the root %s: another certificate, or an altered one", part))
		}
	} else {
		if fl := f.readIndex(); fl != nil {
			return res.fail(fl)
		}
		root := f.Root()
		if res.Root = &root; f.verify() != nil {
			return res.fail(f.verify())
		} else if o.Root != nil && *o.Root != root {
			return res.fail(invalid(ReasonRoot, Where{Expected: o.Root.String(), Found: root.String()}, "the certificate's root %s is not the expected %s", root, *o.Root))
		}
		if o.Span != nil {
			from, upto = spanOf(o.Span.I, o.Span.N, f.Records)
			res.Mode, res.Span = ModeShare, &SpanResult{o.Span.I, o.Span.N, f.base() + from, upto - from}
		}
	}
	if f.Range != nil {
		return res.fail(res.rangeClaims(f, o, from, upto))
	}
	return res.fail(res.sieveClaims(f, o, from, upto, sieve))
}

func (res *Result) fail(fl *Failure) *Result {
	res.Failure = fl
	return res
}

// sieveClaims checks the chunks [from, upto) of a sieve, and as far as the
// file allows its header, in the order of SPEC.md (steps 5 to 10). Every
// record is decoded except in a part check, which reads only its own;
// those outside the share are not judged. Each chunk below the top is
// judged from its stub, found by the map alone, so a chunk judged true is
// true whichever others are read; and with every chunk judged true and
// one per stub, the header's counts are the map's.
func (res *Result) sieveClaims(f *File, o Options, from, upto int, sieve **Sieve) *Failure {
	h, whole, all := f.Sieve, f.Records, res.Mode == ModeFull && f.Shard == nil
	if f.Shard != nil {
		whole = f.Shard.WholeRecords
	}
	p := NewParams(h.Map, h.J)
	if p.keep = sieve != nil; p.sieveWork(h, budget(o)) != nil {
		return p.sieveWork(h, budget(o))
	}
	stubs, first, last, joins, joined, done := p.Stubs(whole), 0, f.Records, uint64(0), [][]uint64(nil), 0
	count := func() *Failure {
		return invalid(ReasonCount, Where{Claim: "chunks", Expected: atLeast(len(stubs)+1, whole+1), Found: strconv.Itoa(whole)},
			"the header declares %d chunks below the top; the map has %s classes open at depth %d", whole-1, atLeast(len(stubs), whole), p.D)
	}
	counts := func() *Failure { // steps 6 and 9: survivors, joins (a whole check), closings
		survivors, closed := p.counts()
		claim := func(what string, found, expected uint64) *Failure {
			return invalid(ReasonCount, Where{Claim: what, Expected: strconv.FormatUint(expected, 10), Found: strconv.FormatUint(found, 10)},
				"the header counts %d %s; the chunks hold %d", found, what, expected)
		}
		if survivors <<= h.K - h.J; survivors != h.Survivors {
			return claim(fmt.Sprintf("survivors mod 2^%d", h.K), h.Survivors, survivors)
		} else if all && h.Joins && joins != h.Joined {
			return claim("joined survivors", h.Joined, joins)
		}
		for s := 1; s <= h.J; s++ {
			if closed[s] != h.ClosedAt[s-1] {
				return claim(fmt.Sprintf("classes closing at step %d", s), h.ClosedAt[s-1], closed[s])
			}
		}
		return nil
	}
	if !all && counts() != nil {
		return counts()
	} else if !all && len(stubs) != whole-1 {
		return count()
	} else if res.Mode == ModePart {
		if first, last = from, upto; p.exceptions(h) != nil {
			return p.exceptions(h)
		}
	}
	var memo Memo
	run := sequential
	if o.Fast != nil && o.Fast.Run != nil {
		run = o.Fast.Run
	}
	work := func(i int) (*Tally, *Failure) {
		rec, off, fl := f.record(first + i)
		g, judge, want := f.base()+first+i, first+i >= from && first+i < upto, (*Stub)(nil)
		if fl != nil {
			return nil, fl
		} else if g > 0 && g <= len(stubs) {
			want = &stubs[g-1]
		}
		t, fl := p.chunk(g, rec, off, want, whole-1, h.Joins, judge, memo)
		if g == 0 && all && fl == nil && len(stubs) != whole-1 { // step 7: after record 0
			return nil, count()
		}
		return t, fl
	}
	take := func(t *Tally) {
		if t == nil { // a record outside the share
			return
		}
		if joins += t.joins; p.keep {
			joined = append(joined, t.Joined)
		}
		if done++; o.Progress != nil {
			o.Progress(done, upto-from)
		}
	}
	// The first record alone, then the memo: a file that fails there, as a
	// damaged one mostly does, costs no memo.
	t, fl := work(0)
	if fl != nil {
		return fl
	} else if take(t); o.Fast != nil && o.Fast.Memo != nil {
		memo = o.Fast.Memo(p)
	}
	if fl := run(last-first-1, func(i int) (*Tally, *Failure) { return work(i + 1) }, take); fl != nil || res.Mode == ModePart {
		return fl
	} else if f.end() != nil {
		return f.end()
	} else if all && counts() != nil {
		return counts()
	} else if fl := p.exceptions(h); fl != nil {
		return fl
	} else if sieve != nil && all {
		*sieve = &Sieve{Root: f.Root(), Header: h, chunks: joined}
	}
	return nil
}

func sequential(n int, work func(int) (*Tally, *Failure), take func(*Tally)) *Failure {
	for i := range n {
		t, fl := work(i)
		if fl != nil {
			return fl
		}
		take(t)
	}
	return nil
}

// atLeast writes n, or "more than max-1" when a count stopped at max.
func atLeast(n, max int) string {
	if n >= max {
		return fmt.Sprintf("more than %d", max-1)
	}
	return strconv.Itoa(n)
}

// RangeSieve checks the sieve certificate in r (name in messages) as the
// sieve of a range that names the root named (step 5): a stored root
// other than named is the reader's mistake, whatever the file holds; then
// it must pass a full check.
func RangeSieve(r io.ReaderAt, size int64, name string, named Hash, o Options) (*Sieve, *Failure) {
	f, fl := open(r, size)
	if fl == nil {
		fl = f.readIndex()
	}
	if fl == nil && f.Root() != named {
		return nil, usage(ReasonSieveMismatch, "give the sieve certificate whose root is "+named.String(),
			"%s has the root %s, but this range rests on the sieve certificate with root %s", name, f.Root(), named)
	} else if fl == nil && (f.Sieve == nil || f.Shard != nil) {
		return nil, invalid(ReasonSieve, Where{Claim: "sieve root", Expected: named.String()}, "the certificate rests on the sieve %s, but %s is not a whole sieve certificate", named, name)
	}
	var sv *Sieve
	switch fl := check(r, size, Options{Budget: o.Budget, Fast: o.Fast}, nil, &sv).Failure; {
	case fl == nil:
		return sv, nil
	case fl.Class == ErrInvalid:
		return nil, invalid(ReasonSieve, Where{}, "the sieve certificate %s it rests on is not valid: %v", name, fl)
	default:
		out := *fl
		out.Msg = fmt.Sprintf("the sieve %s: %s", name, fl.Msg)
		return nil, &out
	}
}

// rangeClaims checks the blocks [from, upto) of a range, or those an
// audit draws among them (steps 5 to 11).
func (res *Result) rangeClaims(f *File, o Options, from, upto int) *Failure {
	h, base, first, last := f.Range, f.base(), 0, f.Records
	if o.Sieve == nil {
		return usage(ReasonSieveMissing, "give that sieve certificate with -sieve FILE", "this range certificate rests on the sieve certificate with root %s, and none was given", h.SieveRoot)
	}
	sv, fl := o.Sieve(h.SieveRoot)
	if fl != nil {
		return fl
	} else if s := sv.Header; s.Map != h.Map || s.K != h.K || s.J != h.K {
		return invalid(ReasonSieve, Where{Claim: "sieve"}, "the sieve is for %s with k = %d, j = %d; the range needs %s with k = j = %d", s.Map, s.K, s.J, h.Map, h.K)
	} else if fl := h.proveRules(); fl != nil {
		return fl
	}
	if res.Mode == ModePart {
		first, last = from, upto
	}
	var blocks []*Block // blocks[i-first] is block base+i
	for i := first; i < last; i++ {
		rec, off, fl := f.record(i)
		if fl != nil {
			return fl
		}
		b, fl := h.parseBlock(rec, base+i, off)
		if fl != nil {
			return fl
		}
		blocks = append(blocks, b)
		res.Undecided = append(res.Undecided, b.Undecided...)
	}
	if res.Mode != ModePart {
		want, fl := total(h, blocks), invalid(ReasonCount, Where{Claim: "header totals"}, "the header's totals differ from the sum of its blocks")
		if f.Shard != nil { // a shard's copy of the whole's header has zero totals
			want, fl = total(h, nil), invalid(ReasonCount, Where{Claim: "totals in a shard"}, "a shard's copy of the whole's header must have zero totals")
		}
		fl.Derived, fl.Stated = &Block{Summary: *want}, &Block{Summary: h.Totals}
		if f.end() != nil {
			return f.end()
		} else if fmt.Sprint(*want) != fmt.Sprint(h.Totals) {
			return fl
		}
	}
	var chosen []int // by place in blocks
	for i := from; i < upto; i++ {
		chosen = append(chosen, i-first)
	}
	if res.Mode != ModePart && o.Draw != nil {
		a, err := o.Draw(*res.Root, len(chosen))
		if err != nil {
			return usage(ReasonUnreadable, "", "no random seed for the audit: %v", err)
		}
		if a != nil {
			var drawn []int
			for k, d := range a.Drawn {
				drawn, a.Drawn[k] = append(drawn, chosen[d]), base+first+chosen[d]
			}
			chosen, res.Audit, res.Mode = drawn, a, ModeAudit
		}
	}
	work, g := new(big.Int), func(i int) int { return base + first + i }
	for _, i := range chosen {
		w, _ := h.blockWork(g(i), &blocks[i].Summary)
		work.Add(work, w)
	}
	if work.Cmp(budget(o)) > 0 {
		return overBudget(fmt.Sprintf("deriving %d blocks of this range", len(chosen)), work, budget(o))
	}
	rg := &Range{H: h, Sieve: sv, P: NewParams(h.Map, h.K)}
	rg.N0 = rg.P.bound(true) // above N0 the sieve rule and a search's jump are exact
	derive := rg.Derive
	if o.Fast != nil && o.Fast.Derive != nil {
		derive = func(i int, m *Meter) *Block { return o.Fast.Derive(rg, i, m) }
	}
	for n, i := range chosen {
		// A true block never takes more steps than its counts allow
		// (section 4): one that does is false.
		_, steps := h.blockWork(g(i), &blocks[i].Summary)
		m := NewMeter(steps)
		b := derive(g(i), m)
		if m.Exceeded() {
			return invalid(ReasonBlock, Where{Chunk: at(g(i)), Claim: "block summary", Expected: "a derivation within " + steps.String() + " steps", Found: "more steps"},
				"re-deriving block %d takes more than the %v steps of search its counts allow (the sum of stopping times plus 4*C per cycle or undecided number): its counts are false", g(i), steps)
		} else if fmt.Sprint(b.Summary, b.Undecided) != fmt.Sprint(blocks[i].Summary, blocks[i].Undecided) {
			fl := invalid(ReasonBlock, Where{Chunk: at(g(i)), Claim: "block summary"}, "block %d does not match its re-derivation", g(i))
			fl.Derived, fl.Stated = b, blocks[i]
			return fl
		}
		if o.Progress != nil {
			o.Progress(n+1, len(chosen))
		}
	}
	return nil
}
