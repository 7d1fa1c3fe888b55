package check

import (
	"crypto/rand"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"math/big"
	"os"
	"sort"

	"golang.org/x/crypto/blake2b"
)

// checkRange checks a range certificate whose header and tree are read
// and verified; f is positioned at its first record.
func checkRange(f *file, rep *Report, o Options) *Report {
	h := f.rng
	joins, fl := rangeSieve(h, rep, o)
	if fl != nil {
		return rep.fail(fl)
	}
	if fl := proveRules(h); fl != nil {
		return rep.fail(fl)
	}

	base := 0 // the global index of the file's first block
	if f.shard != nil {
		base = f.shard.first
	}
	var blocks []*blockRec
	for i := 0; ; i++ {
		rec, fl := f.record()
		if fl != nil {
			return rep.fail(fl)
		}
		if rec == nil {
			break
		}
		if got := leafHash(rec); got != f.tree[0][i+1] {
			c := i
			return rep.fail(invalid(ReasonHash, Where{Chunk: &c, Offset: &f.offsets[i]}, "block %d hashes to %s; the stored tree says %s", i, short(got), short(f.tree[0][i+1])))
		}
		b, fl := parseBlock(rec, f.offsets[i], len(h.rules))
		if fl != nil {
			return rep.fail(fl)
		}
		if b.index != uint32(base+i) {
			return rep.fail(malformed(f.offsets[i], "record %d says it is block %d", base+i, b.index))
		}
		if fl := b.addsUp(h, base+i, f.offsets[i]); fl != nil {
			return rep.fail(fl)
		}
		blocks = append(blocks, b)
	}
	if f.shard != nil {
		// A shard's copy of the whole's header leaves the totals to merge.
		zero := summary{sum: new(big.Int)}
		for i := range zero.counts {
			zero.counts[i] = new(big.Int)
		}
		for range h.rules {
			zero.rules = append(zero.rules, new(big.Int))
		}
		if d := diffSummary(&zero, &h.tot); d != "" {
			return rep.fail(invalid(ReasonCount, Where{Claim: "totals in a shard"}, "a shard's copy of the whole's header must have zero totals: %s", d))
		}
	} else if fl := checkTotals(h, blocks); fl != nil {
		return rep.fail(fl)
	}
	for _, b := range blocks {
		for _, n := range b.undecided {
			rep.Undecided = append(rep.Undecided, Num(n.String()))
		}
	}

	from, upto := 0, len(blocks) // the blocks to derive, by position in the file
	if o.Span != nil {
		from, upto = spanOf(*o.Span, len(blocks))
		rep.Span = &SpanReport{Index: o.Span.I, Of: o.Span.N, First: base + from, Count: upto - from}
	}
	var chosen []int
	for i := from; i < upto; i++ {
		chosen = append(chosen, i)
	}
	if o.Sample > 0 && o.Sample < len(chosen) {
		seed, from := o.Seed, "reader"
		if seed == "" {
			from = "random"
			// A seed the writer cannot know: with none, the draw would depend
			// on the root alone, which the writer can grind (by trying header
			// fields) until the audit misses its wrong blocks.
			var b [16]byte
			if _, err := rand.Read(b[:]); err != nil {
				return rep.fail(usageFail(ReasonUnreadable, "no random seed for the audit: %v", err))
			}
			seed = hex.EncodeToString(b[:])
		}
		share := len(chosen)
		var drawn []int
		for _, k := range sample(f.tree[len(f.tree)-1][0], seed, share, o.Sample) {
			drawn = append(drawn, chosen[k])
		}
		chosen = drawn
		rep.Audit = audit(share, len(chosen))
		rep.Audit.Seed, rep.Audit.SeedFrom = seed, from
		rep.Mode = ModeAudit
	}

	// The work bound of the blocks to derive, before any of it is done.
	total, budget := new(big.Int), budgetOf(o)
	for _, i := range chosen {
		w, _ := blockWork(h.k, h.cap, h.blockSize(base+i), &blocks[i].sum)
		total.Add(total, w)
	}
	if total.Cmp(budget) > 0 {
		return rep.fail(overBudget(fmt.Sprintf("deriving %d blocks of this range", len(chosen)), total, budget))
	}
	s := newSearcher(h, joins)
	for n, i := range chosen {
		if fl := s.check(base+i, blocks[i], o.Workers); fl != nil {
			return rep.fail(fl)
		}
		if o.Progress != nil {
			o.Progress(n+1, len(chosen))
		}
	}
	rep.Below = fatesBelow(h)
	return rep.finish()
}

// check derives block i afresh and compares it with its record b. The
// derivation may take no more steps than b's own counts allow (SPEC.md,
// "Work"): a true block never needs more, so a block that does is false.
func (s *searcher) check(i int, b *blockRec, workers int) *Failure {
	_, steps := blockWork(s.h.k, s.h.cap, s.h.blockSize(i), &b.sum)
	s.sv.work = newMeter(steps)
	want, _ := s.derive(i, defaultWorkers(workers))
	if s.sv.work.exceeded() {
		c := i
		return invalid(ReasonBlock, Where{Chunk: &c, Claim: "block summary", Expected: "a derivation within " + steps.String() + " steps", Found: "more steps"},
			"re-deriving block %d takes more than the %v steps of search its counts allow (the sum of stopping times plus 4*C per cycle or undecided number): its counts are false", i, steps)
	}
	return compareBlock(i, want, b)
}

// rangeSieve checks the sieve certificate a range rests on: given, the
// one it names, valid, and for the same map with j = k. It returns the
// join flags of a sieve with joins.
func rangeSieve(h *rangeHeader, rep *Report, o Options) ([][]uint64, *Failure) {
	named := hexHash(h.sieveRoot)
	if o.Sieve == "" {
		fl := usageFail(ReasonSieveMissing, "this range certificate rests on the sieve certificate with root %s, and none was given", named)
		fl.Hint = "give that sieve certificate with -sieve FILE"
		return nil, fl
	}
	// The stored root first: a file that is not the named sieve is the
	// reader's mistake, whatever it holds.
	if sf, err := os.Open(o.Sieve); err != nil {
		return nil, usageFail(ReasonUnreadable, "the sieve %s cannot be read: %v", o.Sieve, err)
	} else {
		g, fl := openFile(sf)
		sf.Close()
		if fl == nil && hexHash(g.tree[len(g.tree)-1][0]) != named {
			fl := usageFail(ReasonSieveMismatch, "%s has the root %s, but this range rests on the sieve certificate with root %s",
				o.Sieve, hexHash(g.tree[len(g.tree)-1][0]), named)
			fl.Hint = "give the sieve certificate whose root is " + named
			return nil, fl
		}
	}
	var joins [][]uint64
	so := Options{Workers: o.Workers, Budget: o.Budget, Plain: o.Plain, joins: &joins}
	srep := File(o.Sieve, so)
	if err := srep.Err(); err != nil {
		switch fl := srep.failure; fl.Class {
		case ErrInvalid:
			return nil, invalid(ReasonSieve, Where{}, "the sieve certificate %s it rests on is not valid: %v", o.Sieve, err)
		default:
			out := *fl
			out.Msg = fmt.Sprintf("the sieve %s: %s", o.Sieve, fl.Msg)
			return nil, &out
		}
	}
	if srep.Kind != "sieve" || srep.Root != named {
		return nil, invalid(ReasonSieve, Where{Claim: "sieve root", Expected: named, Found: srep.Root},
			"the certificate rests on the sieve %s, but %s is a %s with root %s", named, o.Sieve, srep.Kind, srep.Root)
	}
	if srep.Map != rep.Map || srep.K != h.k || srep.J != h.k {
		return nil, invalid(ReasonSieve, Where{Claim: "sieve"}, "the sieve is for %s with k = %d, j = %d; the range needs %s with k = j = %d",
			srep.Map, srep.K, srep.J, rep.Map, h.k)
	}
	if srep.Joined == "" {
		joins = nil
	}
	return joins, nil
}

// sample picks n distinct blocks of m (SPEC.md, "Audits"): with key =
// BLAKE2b-256("descent audit" 00 || root || seed), the c-th candidate is
// the first 8 bytes of BLAKE2b-256(key || c), as a big-endian integer,
// mod m, for c = 0, 1, 2, ...; repeats are skipped. The root fixes the
// draw before anyone chooses a seed, so the writer cannot steer it.
func sample(root [hashLen]byte, seed string, m, n int) []int {
	key := blake2b.Sum256(append(append([]byte("descent audit\x00"), root[:]...), seed...))
	seen := map[int]bool{}
	var out []int
	for c := uint64(0); len(out) < n; c++ {
		h := blake2b.Sum256(binary.BigEndian.AppendUint64(key[:], c))
		if i := int(binary.BigEndian.Uint64(h[:8]) % uint64(m)); !seen[i] {
			seen[i] = true
			out = append(out, i)
		}
	}
	return out
}

// audit states what a sample of n of m blocks shows: the chance that it
// passes although a given share of the blocks is wrong, drawing without
// replacement.
func audit(m, n int) *Audit {
	a := &Audit{Blocks: m, Audited: n}
	for _, share := range []float64{0.001, 0.01, 0.1} {
		wrong := int(share*float64(m) + 0.999999)
		if n := len(a.PassIfWrong); n > 0 && a.PassIfWrong[n-1].WrongBlocks == wrong {
			continue // the same number of blocks as the smaller share
		}
		p := 1.0
		for i := 0; i < n; i++ {
			if m-wrong-i <= 0 {
				p = 0
				break
			}
			p *= float64(m-wrong-i) / float64(m-i)
		}
		a.PassIfWrong = append(a.PassIfWrong, PassChance{Share: share, WrongBlocks: wrong, Pass: p})
	}
	return a
}

func describeSummary(s *summary) (records []RecordReport, max *RecordReport, cycles []CycleReport) {
	records = []RecordReport{}
	for _, p := range s.records {
		records = append(records, RecordReport{N: Num(p.n.String()), StoppingTime: p.sigma})
	}
	if s.maxAt != nil {
		max = &RecordReport{N: Num(s.maxAt.String()), StoppingTime: s.maxSigma}
	}
	cycles = []CycleReport{}
	for _, c := range s.cycles {
		cycles = append(cycles, CycleReport{Min: Num(c.min.String()), Count: Num(c.count.String())})
	}
	return records, max, cycles
}

// checkTotals compares the header's totals with the sum of the blocks.
func checkTotals(h *rangeHeader, blocks []*blockRec) *Failure {
	want := summary{sum: new(big.Int)}
	for i := range want.counts {
		want.counts[i] = new(big.Int)
	}
	for range h.rules {
		want.rules = append(want.rules, new(big.Int))
	}
	cycles := map[string]*cycleCount{}
	for _, b := range blocks {
		for i, c := range b.sum.counts {
			want.counts[i].Add(want.counts[i], c)
		}
		for i, c := range b.sum.rules {
			want.rules[i].Add(want.rules[i], c)
		}
		want.sum.Add(want.sum, b.sum.sum)
		if b.sum.maxSigma > want.maxSigma {
			want.maxSigma, want.maxAt = b.sum.maxSigma, b.sum.maxAt
		}
		for _, p := range b.sum.records {
			if len(want.records) == 0 || p.sigma > want.records[len(want.records)-1].sigma {
				want.records = append(want.records, p)
			}
		}
		for _, c := range b.sum.cycles {
			if m := cycles[c.min.String()]; m != nil {
				m.count.Add(m.count, c.count)
			} else {
				cycles[c.min.String()] = &cycleCount{min: c.min, count: new(big.Int).Set(c.count)}
			}
		}
	}
	for _, c := range cycles {
		want.cycles = append(want.cycles, *c)
	}
	sortCycles(want.cycles)
	if d := diffSummary(&want, &h.tot); d != "" {
		return invalid(ReasonCount, Where{Claim: "header totals"}, "the header's totals differ from the sum of its blocks: %s", d)
	}
	return nil
}

// blockSize is the number of numbers of block i: [(B0+i)*2^e, (B0+i+1)*2^e)
// cut to [lo, hi).
func (h *rangeHeader) blockSize(i int) *big.Int {
	x0 := new(big.Int).Add(h.first, big.NewInt(int64(i)))
	x0.Lsh(x0, uint(h.e))
	lo, hi := new(big.Int).Set(x0), new(big.Int).Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(h.e)))
	if lo.Cmp(h.lo) < 0 {
		lo.Set(h.lo)
	}
	if hi.Cmp(h.hi) > 0 {
		hi.Set(h.hi)
	}
	return hi.Sub(hi, lo)
}

// addsUp checks that a block has a count for each rule of the header and
// that its counts add up to the numbers in it.
func (b *blockRec) addsUp(h *rangeHeader, i int, at int64) *Failure {
	size := h.blockSize(i)
	sum := new(big.Int)
	for _, c := range b.sum.counts {
		sum.Add(sum, c)
	}
	for _, c := range b.sum.rules {
		sum.Add(sum, c)
	}
	if sum.Cmp(size) != 0 {
		return malformed(at, "block %d counts %v numbers; it has %v", i, sum, size)
	}
	return nil
}

// compareBlock compares a re-derived block with the one in the file.
func compareBlock(i int, want, got *blockRec) *Failure {
	c := i
	d := diffSummary(&want.sum, &got.sum)
	if d == "" && len(want.undecided) != len(got.undecided) {
		d = fmt.Sprintf("undecided numbers: expected %d, found %d", len(want.undecided), len(got.undecided))
	}
	for j := 0; d == "" && j < len(want.undecided); j++ {
		if want.undecided[j].Cmp(got.undecided[j]) != 0 {
			d = fmt.Sprintf("undecided number %d: expected %v, found %v", j, want.undecided[j], got.undecided[j])
		}
	}
	if d == "" {
		return nil
	}
	return invalid(ReasonBlock, Where{Chunk: &c, Claim: "block summary"}, "block %d does not match its re-derivation: %s", i, d)
}

// diffSummary names the first field in which two summaries differ.
func diffSummary(want, got *summary) string {
	for i := range want.counts {
		if want.counts[i].Cmp(got.counts[i]) != 0 {
			return fmt.Sprintf("%s: expected %v, found %v", countNames[i], want.counts[i], got.counts[i])
		}
	}
	if len(want.rules) != len(got.rules) {
		return fmt.Sprintf("rule counts: expected %d, found %d", len(want.rules), len(got.rules))
	}
	for i := range want.rules {
		if want.rules[i].Cmp(got.rules[i]) != 0 {
			return fmt.Sprintf("numbers justified by predecessor rule %d: expected %v, found %v", i, want.rules[i], got.rules[i])
		}
	}
	if want.sum.Cmp(got.sum) != 0 {
		return fmt.Sprintf("sum of stopping times: expected %v, found %v", want.sum, got.sum)
	}
	if want.maxSigma != got.maxSigma || !sameNum(want.maxAt, got.maxAt) {
		return fmt.Sprintf("largest stopping time: expected %d at %v, found %d at %v", want.maxSigma, want.maxAt, got.maxSigma, got.maxAt)
	}
	if len(want.records) != len(got.records) {
		return fmt.Sprintf("records: expected %d, found %d", len(want.records), len(got.records))
	}
	for j, p := range want.records {
		if p.n.Cmp(got.records[j].n) != 0 || p.sigma != got.records[j].sigma {
			return fmt.Sprintf("record %d: expected %v (%d steps), found %v (%d steps)", j, p.n, p.sigma, got.records[j].n, got.records[j].sigma)
		}
	}
	if len(want.cycles) != len(got.cycles) {
		return fmt.Sprintf("cycles: expected %d, found %d", len(want.cycles), len(got.cycles))
	}
	for j, c := range want.cycles {
		if c.min.Cmp(got.cycles[j].min) != 0 || c.count.Cmp(got.cycles[j].count) != 0 {
			return fmt.Sprintf("cycle %d: expected %v (%v numbers), found %v (%v numbers)", j, c.min, c.count, got.cycles[j].min, got.cycles[j].count)
		}
	}
	return ""
}

func sameNum(x, y *big.Int) bool {
	if x == nil || y == nil {
		return x == nil && y == nil
	}
	return x.Cmp(y) == 0
}

func sortCycles(cs []cycleCount) {
	sort.Slice(cs, func(i, j int) bool { return cs[i].min.Cmp(cs[j].min) < 0 })
}
