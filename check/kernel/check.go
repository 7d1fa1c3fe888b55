package kernel

import (
	"crypto/rand"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"io"
	"math/big"
	"strconv"
	"strings"
)

// The order of a check (SPEC.md, section 3): the container, then the
// claims of a sieve or a range, of the whole, a share, a shard or a part.

// Options tune a check. None changes the verdict.
type Options struct {
	Root   *Hash  // if set, the root the certificate must have
	Budget uint64 // the most work, in steps of T (section 4); 0: DefaultBudget
	// Sieve returns the sieve a range rests on, given the root the range
	// names (RangeSieve checks one); nil: none was given.
	Sieve    func(named Hash) (*Sieve, *Failure)
	Span     *Span  // re-derive only this share of the records
	Sample   int    // a range: re-derive only this many blocks, drawn by Seed
	Seed     string // the reader's seed; "" draws one at random
	Progress func(done, total int)
	Fast     *Fast // fast paths; nil: the kernel alone
}

// Span is share I of N of a certificate's records (section 7).
type Span struct{ I, N int }

// Fast holds the fast paths package check plugs in, none trusted blindly:
// the walk takes a memo entry only once Params.Subtree verified it, and
// Run and Derive are fuzzed against the kernel's own way (package check).
type Fast struct {
	Memo func(p *Params) Memo // subtrees of the last levels of the trie
	// Run calls work(i), i = 0..n-1, perhaps at once, and take on each
	// result in the order of i up to the first failure in that order,
	// which it returns.
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

// Audit names the blocks an audit drew (section 6, "Audits"), by index in
// the file, in the order drawn, from Blocks; SeedFrom is "reader" or "random".
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
func Check(r io.ReaderAt, size int64, o Options) *Result { return check(r, size, o, nil) }

// check checks a certificate, and puts a whole sieve, checked in full,
// with its joins in *sieve if sieve is not nil.
func check(r io.ReaderAt, size int64, o Options, sieve **Sieve) *Result {
	res := &Result{Mode: ModeFull}
	f, fl := open(r, size)
	if res.File = f; fl == nil {
		fl = f.readIndex()
	}
	if fl == nil {
		root := f.Root()
		if res.Root, fl = &root, f.verify(); fl == nil && o.Root != nil && *o.Root != root {
			fl = invalid(ReasonRoot, Where{Expected: o.Root.String(), Found: root.String()}, "the certificate's root %s is not the expected %s", root, *o.Root)
		}
	}
	from, upto := 0, f.Records
	if o.Span != nil {
		res.Mode = ModeShare
		from, upto = spanOf(o.Span.I, o.Span.N, f.Records)
	}
	if fl == nil {
		fl = res.claims(f, o, from, upto, sieve)
	}
	return res.fail(fl)
}

// share names the share of the records a check re-derives, once it knows
// it is the share it checks.
func (res *Result) share(o Options, f *File, from, upto int) {
	if o.Span != nil {
		res.Span = &SpanResult{o.Span.I, o.Span.N, f.base() + from, upto - from}
	}
}

func (res *Result) fail(fl *Failure) *Result {
	res.Failure = fl
	return res
}

// Part checks part of a whole certificate against a published root,
// reading only the header, the audit paths, two offsets per record and
// the records (section 7): "P", the record P, or "i/N", share i of N.
func Part(r io.ReaderAt, size int64, part string, root Hash, o Options) *Result {
	res := &Result{Mode: ModePart}
	f, fl := open(r, size)
	if res.File = f; fl != nil {
		return res.fail(fl)
	}
	if f.Shard != nil {
		return res.fail(usage(ReasonPart, "check a shard file whole, without -part", "-part checks a whole certificate against its root, and this file is a shard"))
	}
	if end := int64(len(f.Header)) + f.treeLen() + 8*int64(f.Records+1); end > size {
		return res.fail(malformed(size, "the file has %d bytes; a certificate of %d records needs %d before its first record", size, f.Records, end))
	}
	si, sn, share := strings.Cut(part, "/")
	i, e1 := strconv.Atoi(si)
	n, e2 := strconv.Atoi(sn)
	from, upto := i, i+1
	switch {
	case share && (e1 != nil || e2 != nil || n < 1 || i < 0 || i >= n || n > f.Records):
		return res.fail(usage(ReasonPart, fmt.Sprintf("want i/N with 0 <= i < N <= %d", f.Records), "-part %q names no share of this certificate's %d records", part, f.Records))
	case share:
		from, upto = spanOf(i, n, f.Records)
	case e1 != nil || i < 0 || i >= f.Records:
		return res.fail(usage(ReasonPart, fmt.Sprintf("want a record from 0 to %d", f.Records-1), "-part %q names no record of this certificate", part))
	}
	res.Span, res.Root = &SpanResult{First: from, Count: upto - from}, &root
	if ok, fl := f.proves(LeafHash(f.Header), 0, root); fl != nil {
		return res.fail(fl)
	} else if !ok {
		return res.fail(invalid(ReasonAudit, Where{Claim: "header", Expected: root.String()},
			"the header with its audit path does not lead to the root %s: another certificate, or an altered one", root))
	}
	return res.fail(res.claims(f, o, from, upto, nil))
}

// record reads record i with its offset: in a part check, against the
// root through its audit path (section 7); else against the stored tree.
func (res *Result) record(f *File, i int) ([]byte, int64, *Failure) {
	if res.Mode != ModePart {
		rec, fl := f.record(i)
		return rec, f.Offsets[i], fl
	}
	b, fl := f.readAt(int64(len(f.Header))+f.treeLen()+8*int64(i), 16, "record offsets")
	if fl != nil {
		return nil, 0, fl
	}
	a, e := int64(binary.BigEndian.Uint64(b)), int64(binary.BigEndian.Uint64(b[8:]))
	rec, fl := f.readAt(a, e-a, fmt.Sprintf("record %d", i))
	if fl != nil {
		return nil, a, fl
	}
	if ok, fl := f.proves(LeafHash(rec), i+1, *res.Root); fl != nil || !ok {
		if fl == nil {
			fl = invalid(ReasonAudit, Where{Chunk: chunkAt(i), Offset: &a, Expected: res.Root.String()},
				"record %d with its audit path does not lead to the root %s: a swapped record, one from another certificate, or an altered tree", i, res.Root)
		}
		return nil, a, fl
	}
	return rec, a, nil
}

func budget(o Options) *big.Int {
	if o.Budget > 0 {
		return new(big.Int).SetUint64(o.Budget)
	}
	return big.NewInt(DefaultBudget)
}

// claims checks the claims of the records [from, upto) of the file, and,
// as far as the file allows, of its header (steps 5 to 11).
func (res *Result) claims(f *File, o Options, from, upto int, sieve **Sieve) *Failure {
	if f.Range != nil {
		return res.rangeClaims(f, o, from, upto)
	}
	h, whole, part := f.Sieve, f.Records, res.Mode == ModePart
	p := NewParams(h.Map, h.J)
	if p.keep = sieve != nil; f.Shard != nil {
		whole = f.Shard.WholeRecords
	}
	if fl := p.sieveWork(h, budget(o)); fl != nil {
		return fl
	}
	res.share(o, f, from, upto)
	tally, stubs, first := &Tally{Closed: make([]uint64, p.J+1)}, []Stub(nil), 0
	partial := f.Shard != nil || res.Mode != ModeFull
	if partial { // the counts and the stubs from the map alone (step 6)
		if tally = p.table(); tally.counts(h, false) != nil {
			return tally.counts(h, false)
		}
		if stubs = p.Stubs(whole); len(stubs) != whole-1 {
			return invalid(ReasonCount, Where{Claim: "chunks", Expected: atLeast(len(stubs)+1, whole+1), Found: strconv.Itoa(whole)},
				"the header declares %d chunks below the top; the map has %s classes open at depth %d", whole-1, atLeast(len(stubs), whole), p.D)
		}
	}
	if part { // a part check reads its records last
		if fl := p.exceptions(h); fl != nil {
			return fl
		}
		first = from
	} else if !partial { // record 0 first: the others start at its stubs
		rec, fl := f.record(0)
		if fl != nil {
			return fl
		}
		top, fl := p.chunk(0, rec, f.Offsets[0], nil, f.Records-1, h.Joins, true, nil)
		if fl != nil {
			return fl
		}
		if stubs, first = top.Stubs, 1; len(stubs) != f.Records-1 {
			return invalid(ReasonCount, Where{Claim: "chunks", Expected: strconv.Itoa(len(stubs) + 1), Found: strconv.Itoa(f.Records)},
				"the header declares %d chunks below the top; the top of the trie has %d classes open at depth %d", f.Records-1, len(stubs), p.D)
		}
		tally.add(top)
	}
	var memo Memo
	run, last, done, joined := sequential, f.Records, 0, [][]uint64(nil)
	if o.Fast != nil && o.Fast.Memo != nil {
		memo = o.Fast.Memo(p)
	}
	if o.Fast != nil && o.Fast.Run != nil {
		run = o.Fast.Run
	}
	if part {
		last = upto
	}
	work := func(i int) (*Tally, *Failure) {
		rec, at, fl := res.record(f, first+i)
		switch g := f.base() + first + i; {
		case fl != nil:
			return nil, fl
		case first+i < from || first+i >= upto: // outside the share: decoded, not judged
			return p.chunk(g, rec, at, nil, 0, h.Joins, false, nil)
		case g == 0:
			return p.chunk(0, rec, at, nil, len(stubs), h.Joins, true, nil)
		default:
			return p.chunk(g, rec, at, &stubs[g-1], 0, h.Joins, true, memo)
		}
	}
	take := func(t *Tally) {
		if t == nil { // a record outside the share
			return
		}
		if !partial {
			tally.add(t)
		}
		if p.keep {
			joined = append(joined, t.Joined)
		}
		if done++; o.Progress != nil {
			o.Progress(done, upto-max(from, first))
		}
	}
	if fl := run(last-first, work, take); fl != nil || part {
		return fl
	}
	if fl := f.end(); fl != nil {
		return fl
	}
	if !partial && tally.counts(h, true) != nil {
		return tally.counts(h, true)
	}
	if fl := p.exceptions(h); fl != nil {
		return fl
	}
	if sieve != nil && !partial {
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

// counts compares the header's counts with what the verified claims add
// up to (steps 6 and 9): survivors, joins (if every chunk was read),
// closings.
func (t *Tally) counts(h *SieveHeader, joins bool) *Failure {
	if got := t.Survivors << (h.K - h.J); got != h.Survivors {
		return invalid(ReasonCount, Where{Claim: "survivors", Expected: strconv.FormatUint(got, 10), Found: strconv.FormatUint(h.Survivors, 10)},
			"the header counts %d survivors mod 2^%d; the chunks hold %d", h.Survivors, h.K, got)
	}
	if joins && h.Joins && t.joins != h.Joined {
		return invalid(ReasonCount, Where{Claim: "joined survivors", Expected: strconv.FormatUint(t.joins, 10), Found: strconv.FormatUint(h.Joined, 10)},
			"the header counts %d joined survivors; the chunks hold %d joins", h.Joined, t.joins)
	}
	for s := 1; s <= h.J; s++ {
		if t.Closed[s] != h.ClosedAt[s-1] {
			return invalid(ReasonCount, Where{Claim: fmt.Sprintf("classes closing at step %d", s), Step: s, Expected: strconv.FormatUint(t.Closed[s], 10), Found: strconv.FormatUint(h.ClosedAt[s-1], 10)},
				"the header counts %d classes closing at step %d; the chunks hold %d", h.ClosedAt[s-1], s, t.Closed[s])
		}
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
	}
	if fl == nil && (f.Sieve == nil || f.Shard != nil) {
		return nil, invalid(ReasonSieve, Where{Claim: "sieve root", Expected: named.String()}, "the certificate rests on the sieve %s, but %s is not a whole sieve certificate", named, name)
	}
	var sv *Sieve
	switch fl := check(r, size, Options{Budget: o.Budget, Fast: o.Fast}, &sv).Failure; {
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

// rangeClaims checks a range (steps 5 to 11).
func (res *Result) rangeClaims(f *File, o Options, from, upto int) *Failure {
	h, base, first, last := f.Range, f.base(), 0, f.Records
	if o.Sieve == nil {
		return usage(ReasonSieveMissing, "give that sieve certificate with -sieve FILE", "this range certificate rests on the sieve certificate with root %s, and none was given", h.SieveRoot)
	}
	sv, fl := o.Sieve(h.SieveRoot)
	if fl != nil {
		return fl
	}
	if s := sv.Header; s.Map != h.Map || s.K != h.K || s.J != h.K {
		return invalid(ReasonSieve, Where{Claim: "sieve"}, "the sieve is for %s with k = %d, j = %d; the range needs %s with k = j = %d", s.Map, s.K, s.J, h.Map, h.K)
	}
	if fl := h.proveRules(); fl != nil {
		return fl
	}
	if res.Mode == ModePart {
		first, last = from, upto
	}
	var blocks []*Block
	for i := first; i < last; i++ {
		rec, at, fl := res.record(f, i)
		if fl != nil {
			return fl
		}
		b, fl := h.parseBlock(rec, base+i, at)
		if fl != nil {
			return fl
		}
		blocks = append(blocks, b)
	}
	var chosen []int // by place in blocks
	for i := from; i < upto; i++ {
		chosen = append(chosen, i-first)
	}
	if res.Mode != ModePart {
		want, claim := total(h, blocks), "header totals"
		if f.Shard != nil { // a shard's copy of the whole's header has zero totals
			want, claim = total(h, nil), "totals in a shard"
		}
		if fl := f.end(); fl != nil {
			return fl
		} else if d := diff(want.fields(), h.Totals.fields()); d != "" && f.Shard != nil {
			return invalid(ReasonCount, Where{Claim: claim}, "a shard's copy of the whole's header must have zero totals: %s", d)
		} else if d != "" {
			return invalid(ReasonCount, Where{Claim: claim}, "the header's totals differ from the sum of its blocks: %s", d)
		}
	}
	for _, b := range blocks {
		res.Undecided = append(res.Undecided, b.Undecided...)
	}
	res.share(o, f, from, upto)
	if res.Mode != ModePart && o.Sample > 0 && o.Sample < len(chosen) {
		a := &Audit{Blocks: len(chosen), Seed: o.Seed, SeedFrom: "reader"}
		if a.Seed == "" {
			// A seed the writer cannot know: with none, the draw would depend
			// on the root alone, which the writer can grind.
			var b [16]byte
			if _, err := rand.Read(b[:]); err != nil {
				return usage(ReasonUnreadable, "", "no random seed for the audit: %v", err)
			}
			a.Seed, a.SeedFrom = hex.EncodeToString(b[:]), "random"
		}
		var drawn []int
		for _, k := range AuditDraw(*res.Root, a.Seed, len(chosen), o.Sample) {
			drawn, a.Drawn = append(drawn, chosen[k]), append(a.Drawn, base+chosen[k])
		}
		chosen, res.Audit, res.Mode = drawn, a, ModeAudit
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
	rg.N0 = rg.P.SmallBound()
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
			return invalid(ReasonBlock, Where{Chunk: chunkAt(g(i)), Claim: "block summary", Expected: "a derivation within " + steps.String() + " steps", Found: "more steps"},
				"re-deriving block %d takes more than the %v steps of search its counts allow (the sum of stopping times plus 4*C per cycle or undecided number): its counts are false", g(i), steps)
		}
		if d := diff(b.fields(), blocks[i].fields()); d != "" {
			return invalid(ReasonBlock, Where{Chunk: chunkAt(g(i)), Claim: "block summary"}, "block %d does not match its re-derivation: %s", g(i), d)
		}
		if o.Progress != nil {
			o.Progress(n+1, len(chosen))
		}
	}
	return nil
}
