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
// claims of a sieve or a range, the whole, a share, a shard or a part.

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
// the kernel uses a memo entry only once it validated it (Params.Subtree),
// and Run and Derive are fuzzed against the kernel's own way.
type Fast struct {
	Memo func(p *Params) Memo // the subtrees of the last levels of the trie
	// Run calls work(i) for i = 0..n-1, perhaps at once, and take on each
	// result in the order of i until the first failure in that order,
	// which it returns.
	Run func(n int, work func(i int) (*Tally, *Failure), take func(*Tally)) *Failure
	// Derive derives block i as Range.Derive does, charging its steps to m.
	Derive func(r *Range, i int, m *Meter) *Block
}

// The modes of a check: what share of a certificate it re-derives.
const (
	ModeFull  = "full"  // every record of the file
	ModeAudit = "audit" // the blocks of a range drawn by a seed
	ModeShare = "share" // share i of N of the file's records
	ModePart  = "part"  // records of a whole certificate against a published root
)

// Result is the outcome of a check: what was read, what was re-derived,
// and the first failure, if any. The headers are as written; they are
// shown true only if Failure is nil, and only as far as Mode says.
type Result struct {
	File      *File // the header and, but for a part, the stored tree
	Root      *Hash // the stored root, or in a part check the given one
	Mode      string
	Span      *SpanResult // a share, or the records of a part
	Audit     *Audit
	Undecided []*big.Int // a range's undecided numbers, from its records
	Below     []Fate     // what the numbers below a range from 1 or 2 reach; nil: not derived
	Failure   *Failure
}

// SpanResult names records I of N: First to First+Count-1 of the whole.
type SpanResult struct{ Index, Of, First, Count int }

// Audit says which blocks an audit drew (section 6, "Audits").
type Audit struct {
	Blocks   int    // the blocks drawn from
	Drawn    []int  // the blocks drawn, by index in the file, in the order drawn
	Seed     string // repeat the audit with it
	SeedFrom string // "reader" (given) or "random" (drawn by the checker)
}

// Err returns nil for a certificate found valid and the failure otherwise.
func (r *Result) Err() error {
	if r.Failure == nil {
		return nil
	}
	return r.Failure
}

func budget(o Options) *big.Int {
	if o.Budget > 0 {
		return new(big.Int).SetUint64(o.Budget)
	}
	return big.NewInt(DefaultBudget)
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

// Check checks the certificate of size bytes in r.
func Check(r io.ReaderAt, size int64, o Options) *Result { return check(r, size, o, nil) }

// check checks a certificate; a whole sieve checked in full is put in
// *sieve, if given, with its joins.
func check(r io.ReaderAt, size int64, o Options, sieve **Sieve) *Result {
	res := &Result{Mode: ModeFull}
	if o.Span != nil {
		res.Mode = ModeShare
	}
	f, fl := open(r, size)
	if res.File = f; fl == nil {
		fl = f.readIndex()
	}
	if fl == nil {
		root := f.Root()
		res.Root = &root
		if fl = f.verify(); fl == nil && o.Root != nil && *o.Root != root {
			fl = invalid(ReasonRoot, Where{Expected: o.Root.String(), Found: root.String()}, "the certificate's root %s is not the expected %s", root, *o.Root)
		}
	}
	if fl == nil {
		from, upto := 0, f.Records
		if o.Span != nil {
			from, upto = spanOf(o.Span.I, o.Span.N, f.Records)
			res.Span = &SpanResult{o.Span.I, o.Span.N, f.base() + from, upto - from}
		}
		fl = res.claims(f, o, from, upto, sieve)
	}
	res.Failure = fl
	return res
}

// base is the whole's index of the file's first record.
func (f *File) base() int {
	if f.Shard != nil {
		return f.Shard.First
	}
	return 0
}

// claims checks the claims of the records [from, upto) of the file, and,
// as far as the file allows, of its header (steps 5 to 11).
func (res *Result) claims(f *File, o Options, from, upto int, sieve **Sieve) *Failure {
	if f.Range != nil {
		return res.rangeClaims(f, o, from, upto)
	}
	h, base, whole := f.Sieve, f.base(), f.Records
	p := NewParams(h.Map, h.J)
	p.keep = sieve != nil
	if fl := p.sieveWork(h, budget(o)); fl != nil {
		return fl
	}
	partial := f.Shard != nil || o.Span != nil || res.Mode == ModePart
	tally := &Tally{Closed: make([]uint64, p.J+1)}
	var stubs []Stub
	if f.Shard != nil {
		whole = f.Shard.WholeRecords
	}
	if partial { // the counts and the stubs from the map alone (step 6)
		tally.Survivors, tally.Closed = p.table()
		if fl := tally.counts(h, false); fl != nil {
			return fl
		}
		if stubs = p.Stubs(whole); len(stubs) != whole-1 {
			return invalid(ReasonCount, Where{Claim: "chunks", Expected: atLeast(len(stubs)+1, whole+1), Found: strconv.Itoa(whole)},
				"the header declares %d chunks below the top; the map has %s classes open at depth %d", whole-1, atLeast(len(stubs), whole), p.D)
		}
	}
	var memo Memo
	if o.Fast != nil && o.Fast.Memo != nil {
		memo = o.Fast.Memo(p)
	}
	first, run := 0, sequential
	if o.Fast != nil && o.Fast.Run != nil {
		run = o.Fast.Run
	}
	if res.Mode == ModePart {
		if fl := p.exceptions(h); fl != nil { // a part check reads its records last
			return fl
		}
		first = from
	} else if !partial { // record 0 first: the others start at its stubs
		rec, fl := f.record(0)
		if fl != nil {
			return fl
		}
		top, fl := p.chunk(0, rec, f.Offsets[0], nil, f.Records-1, h.Joins, nil)
		if fl != nil {
			return fl
		}
		if stubs, first = top.Stubs, 1; len(stubs) != f.Records-1 {
			return invalid(ReasonCount, Where{Claim: "chunks", Expected: strconv.Itoa(len(stubs) + 1), Found: strconv.Itoa(f.Records)},
				"the header declares %d chunks below the top; the top of the trie has %d classes open at depth %d", f.Records-1, len(stubs), p.D)
		}
		tally.add(top)
	}
	var joined [][]uint64 // chunk by chunk
	done, last := 0, f.Records
	if res.Mode == ModePart {
		last = upto
	}
	work := func(i int) (*Tally, *Failure) {
		i += first
		rec, at, fl := res.record(f, i)
		g := base + i
		switch {
		case fl != nil:
			return nil, fl
		case i < from || i >= upto: // outside the share: decoded, not judged
			return nil, p.grammar(g, rec, at, h.Joins)
		case g == 0:
			return p.chunk(0, rec, at, nil, len(stubs), h.Joins, nil)
		}
		return p.chunk(g, rec, at, &stubs[g-1], 0, h.Joins, memo)
	}
	take := func(t *Tally) {
		if t == nil { // a record outside the share
			return
		}
		if !partial {
			tally.add(t)
		}
		if sieve != nil && len(t.Joined) > 0 {
			joined = append(joined, t.Joined)
		}
		if done++; o.Progress != nil {
			o.Progress(done, upto-max(from, first))
		}
	}
	if fl := run(last-first, work, take); fl != nil {
		return fl
	}
	if res.Mode == ModePart {
		return nil
	}
	if fl := f.end(); fl != nil {
		return fl
	}
	if !partial {
		if fl := tally.counts(h, true); fl != nil {
			return fl
		}
	}
	if fl := p.exceptions(h); fl != nil {
		return fl
	}
	if sieve != nil && !partial {
		*sieve = &Sieve{Root: f.Root(), Header: h, chunks: joined}
	}
	return nil
}

func (t *Tally) add(u *Tally) {
	t.Survivors += u.Survivors
	t.joins += u.joins
	for i, c := range u.Closed {
		t.Closed[i] += c
	}
}

// counts compares the header's counts with what the verified claims add
// up to (steps 6 and 9): survivors, joins (if all were read), closings.
func (t *Tally) counts(h *SieveHeader, joins bool) *Failure {
	if got := t.Survivors << (h.K - h.J); got != h.Survivors {
		return invalid(ReasonCount, Where{Claim: "survivors", Expected: strconv.FormatUint(got, 10), Found: strconv.FormatUint(h.Survivors, 10)},
			"the header counts %d survivors mod 2^%d; the chunks hold %d", h.Survivors, h.K, got)
	}
	if got := t.joins; joins && h.Joins && got != h.Joined {
		return invalid(ReasonCount, Where{Claim: "joined survivors", Expected: strconv.FormatUint(got, 10), Found: strconv.FormatUint(h.Joined, 10)},
			"the header counts %d joined survivors; the chunks hold %d joins", h.Joined, got)
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

// record reads record i and returns it with its offset: in a part check,
// against the root through its audit path (section 7); else against the
// stored tree.
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
		return nil, a, or(fl, invalid(ReasonAudit, Where{Chunk: chunkAt(i), Offset: &a, Expected: res.Root.String()},
			"record %d with its audit path does not lead to the root %s: a swapped record, one from another certificate, or an altered tree", i, res.Root))
	}
	return rec, a, nil
}

func or(a, b *Failure) *Failure {
	if a != nil {
		return a
	}
	return b
}

// Part checks part of a whole certificate against a published root,
// reading only the header, the audit paths, two offsets per record and
// the records (section 7): "P", the record P, or "i/N", share i of N.
func Part(r io.ReaderAt, size int64, part string, root Hash, o Options) *Result {
	res := &Result{Mode: ModePart}
	f, fl := open(r, size)
	res.File = f
	if fl != nil {
		return res.fail(fl)
	}
	if f.Shard != nil {
		return res.fail(usage(ReasonPart, "check a shard file whole, without -part", "-part checks a whole certificate against its root, and this file is a shard"))
	}
	if end := int64(len(f.Header)) + f.treeLen() + 8*int64(f.Records+1); end > size {
		return res.fail(malformed(size, "the file has %d bytes; a certificate of %d records needs %d before its first record", size, f.Records, end))
	}
	from, upto := 0, 0
	if i, n, ok := strings.Cut(part, "/"); ok {
		si, e1 := strconv.Atoi(i)
		sn, e2 := strconv.Atoi(n)
		if e1 != nil || e2 != nil || sn < 1 || si < 0 || si >= sn || sn > f.Records {
			return res.fail(usage(ReasonPart, fmt.Sprintf("want i/N with 0 <= i < N <= %d", f.Records), "-part %q names no share of this certificate's %d records", part, f.Records))
		}
		from, upto = spanOf(si, sn, f.Records)
	} else if p, err := strconv.Atoi(part); err != nil || p < 0 || p >= f.Records {
		return res.fail(usage(ReasonPart, fmt.Sprintf("want a record from 0 to %d", f.Records-1), "-part %q names no record of this certificate", part))
	} else {
		from, upto = p, p+1
	}
	res.Span, res.Root = &SpanResult{First: from, Count: upto - from}, &root
	if ok, fl := f.proves(LeafHash(f.Header), 0, root); fl != nil || !ok {
		return res.fail(or(fl, invalid(ReasonAudit, Where{Claim: "header", Expected: root.String()},
			"the header with its audit path does not lead to the root %s: another certificate, or an altered one", root)))
	}
	return res.fail(res.claims(f, o, from, upto, nil))
}

func (res *Result) fail(fl *Failure) *Result {
	res.Failure = fl
	return res
}

// RangeSieve checks the sieve certificate in r (named name in messages)
// as the sieve of a range that names the root named (step 5): its stored
// root must be named (else the reader's mistake), and it must pass a full
// check with the same options.
func RangeSieve(r io.ReaderAt, size int64, name string, named Hash, o Options) (*Sieve, *Failure) {
	f, fl := open(r, size)
	if fl == nil {
		fl = f.readIndex()
	}
	if fl == nil && f.Root() != named { // the reader's mistake, whatever the file holds
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
	h, base := f.Range, f.base()
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
	var blocks []*Block
	first, last := 0, f.Records
	if res.Mode == ModePart {
		first, last = from, upto
	}
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
		if fl := f.end(); fl != nil {
			return fl
		}
		if f.Shard != nil { // a shard's copy of the whole's header has zero totals
			if d := diff(total(h, nil), &h.Totals); d != "" {
				return invalid(ReasonCount, Where{Claim: "totals in a shard"}, "a shard's copy of the whole's header must have zero totals: %s", d)
			}
		} else if d := diff(total(h, blocks), &h.Totals); d != "" {
			return invalid(ReasonCount, Where{Claim: "header totals"}, "the header's totals differ from the sum of its blocks: %s", d)
		}
		for _, b := range blocks {
			res.Undecided = append(res.Undecided, b.Undecided...)
		}
		if o.Sample > 0 && o.Sample < len(chosen) {
			a := &Audit{Blocks: len(chosen), Seed: o.Seed, SeedFrom: "reader"}
			if a.Seed == "" {
				// A seed the writer cannot know: with none, the draw would
				// depend on the root alone, which the writer can grind.
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
	}
	if res.Mode == ModePart {
		for _, b := range blocks {
			res.Undecided = append(res.Undecided, b.Undecided...)
		}
	}
	work := new(big.Int)
	for _, i := range chosen {
		w, _ := h.blockWork(base+first+i, &blocks[i].Summary)
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
		g := base + first + i
		_, steps := h.blockWork(g, &blocks[i].Summary)
		m := NewMeter(steps)
		if b := derive(g, m); m.Exceeded() {
			return invalid(ReasonBlock, Where{Chunk: chunkAt(g), Claim: "block summary", Expected: "a derivation within " + steps.String() + " steps", Found: "more steps"},
				"re-deriving block %d takes more than the %v steps of search its counts allow (the sum of stopping times plus 4*C per cycle or undecided number): its counts are false", g, steps)
		} else if fl := compare(g, b, blocks[i]); fl != nil {
			return fl
		}
		if o.Progress != nil {
			o.Progress(n+1, len(chosen))
		}
	}
	res.Below = FatesBelow(h.Map, h.Cap, h.Ceiling, h.Lo)
	return nil
}

// FatesBelow derives what each number below lo reaches by the fate rule,
// when lo <= 2 (then there is at most the number 1), so that a range from
// 1 or 2 can name every cycle reached below hi; nil otherwise, or if it
// would take more than 2^24 steps.
func FatesBelow(m Map, C uint32, W int, lo *big.Int) []Fate {
	if lo == nil || lo.Cmp(big.NewInt(2)) > 0 {
		return nil
	}
	p, meter, out := NewParams(m, 1), NewMeter(big.NewInt(1<<24)), []Fate{}
	for n := int64(1); n < lo.Int64(); n++ {
		if out = append(out, p.Fate(big.NewInt(n), C, W, meter)); meter.Exceeded() {
			return nil
		}
	}
	return out
}
