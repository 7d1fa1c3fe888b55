// Package check is the independent checker of descent certificates. It
// reads a certificate with its own decoder, written from cert/SPEC.md, and
// re-derives every claim with its own arithmetic: the hashes and the root,
// that the chunks cover every residue once, every closing step, every
// survivor, the counts, and every exception and its fate. It imports only
// the standard library and BLAKE2b, never the packages that write
// certificates, so that a mistake there cannot hide a mistake here.
package check

import (
	"fmt"
	"io"
	"os"
	"runtime"
	"strconv"
	"sync"
)

// Options tune a check. None changes the verdict.
type Options struct {
	Workers int            // chunks verified in parallel; 0 means GOMAXPROCS
	Root    *[hashLen]byte // if set, the root the certificate must have
	Plain   bool           // walk every class, without the memo: slower, same verdict

	// Range certificates.
	Sieve  string // the sieve certificate the range rests on
	Sample int    // if > 0, re-derive only this many blocks, chosen from the root and Seed
	Seed   string

	// Span, if set, re-derives only that share of the records, so that
	// reviewers can split a check among themselves.
	Span *Span

	// Budget is the most work, in steps of T, the reader allows (SPEC.md,
	// "Work"); a certificate whose work bound exceeds it is refused as
	// beyond limits before that work. 0 means DefaultBudget.
	Budget uint64

	// Progress, if set, is called after each record re-derived, with the
	// records done and the records to do.
	Progress func(done, total int)

	// joins, if set, receives the join flags of a sieve with joins, for a
	// range that rests on it.
	joins *[][]uint64
}

// File checks the certificate stored at path.
func File(path string, o Options) *Report {
	f, err := os.Open(path)
	if err != nil {
		rep := newReport(o)
		rep.File = path
		return rep.fail(&Failure{Class: ErrUsage, Reason: ReasonUnreadable, Msg: "cannot read: " + err.Error()})
	}
	defer f.Close()
	rep := Check(f, o)
	rep.File = path
	return rep
}

// Check reads a certificate from r, front to back, and checks it.
func Check(r io.Reader, o Options) *Report {
	rep := newReport(o)
	f, fl := openFile(r)
	if f.hdr != nil {
		rep.describe(f)
	}
	if f.rng != nil {
		rep.describeRange(f)
	}
	if f.shard != nil {
		rep.describeShard(f)
	}
	if fl != nil {
		return rep.fail(fl)
	}
	root := f.tree[len(f.tree)-1][0]
	rep.Root = hexHash(root)

	// The header and the stored tree first: a changed byte there shows
	// as a hash failure before any claim is read.
	if got := leafHash(f.header); got != f.tree[0][0] {
		return rep.fail(invalid(ReasonHash, Where{Offset: new(int64)}, "the header hashes to %s; the stored tree says %s", short(got), short(f.tree[0][0])))
	}
	if fl := verifyTree(f.tree); fl != nil {
		return rep.fail(fl)
	}
	if o.Root != nil && *o.Root != root {
		return rep.fail(invalid(ReasonRoot, Where{Expected: hexHash(*o.Root), Found: rep.Root},
			"the certificate's root %s is not the expected %s", rep.Root, hexHash(*o.Root)))
	}

	if f.rng != nil {
		return checkRange(f, rep, o)
	}
	sv := newSieve(f.hdr)
	sv.useMemo = !o.Plain
	if fl := sv.sieveLimits(budgetOf(o)); fl != nil {
		return rep.fail(fl)
	}
	if f.shard != nil || o.Span != nil {
		base, from, upto := 0, 0, f.records
		if f.shard != nil {
			base = f.shard.first
		}
		if o.Span != nil {
			from, upto = spanOf(*o.Span, f.records)
			rep.Span = &SpanReport{Index: o.Span.I, Of: o.Span.N, First: base + from, Count: upto - from}
		}
		if fl := sv.checkSievePart(f, base, from, upto, o.Progress); fl != nil {
			return rep.fail(fl)
		}
		return rep.finish()
	}
	sv.keepJoins = o.joins != nil && sv.h.joins
	tally, fl := sv.checkChunks(f, o.Workers, o.Progress)
	if fl != nil {
		return rep.fail(fl)
	}
	if sv.keepJoins {
		*o.joins = tally.flags
	}
	if fl := sv.checkCounts(tally); fl != nil {
		return rep.fail(fl)
	}
	if fl := sv.checkExceptions(); fl != nil {
		return rep.fail(fl)
	}
	rep.Valid = true
	return rep
}

// newReport starts a report in the mode the options ask for; a range
// check settles an audit's mode once it knows the blocks.
func newReport(o Options) *Report {
	v := Version()
	rep := &Report{Mode: ModeFull, Checker: &v}
	if o.Span != nil {
		rep.Mode = ModeShare
	}
	return rep
}

// finish marks a valid report, and a partial one as such.
func (r *Report) finish() *Report {
	r.Valid = true
	r.Partial = r.Span != nil || r.Audit != nil || r.Shard != nil
	return r
}

func (r *Report) describe(f *file) {
	h := f.hdr
	r.Kind, r.Map, r.K, r.J, r.Cap, r.Chunks = "sieve", mapName(h.a, h.b), h.k, h.j, h.cap, f.records
	r.Ceiling = h.ceiling
	r.Survivors = numU(h.survivors)
	if h.joins {
		r.Joined, r.SieveSurvivors = numU(h.joined), numU(h.survivors)
		r.Survivors = numU(h.survivors - h.joined)
	}
	r.ClosedAt = map[string]Num{}
	for t, c := range h.closedAt {
		if c != 0 {
			r.ClosedAt[strconv.Itoa(t+1)] = numU(c)
		}
	}
	r.Exceptions = []ExceptionReport{}
	for _, e := range h.exc {
		er := ExceptionReport{N: Num(e.n.String()), Fate: [...]string{"", "descends", "cycle", "undecided"}[e.fate], Steps: e.steps}
		if e.fate == 2 {
			er.CycleMin = Num(e.cycleMin.String())
		}
		r.Exceptions = append(r.Exceptions, er)
	}
}

func (r *Report) describeRange(f *file) {
	h := f.rng
	r.Kind, r.Map, r.K, r.Cap, r.Chunks = "range", mapName(h.a, h.b), h.k, h.cap, f.records
	r.SieveRoot, r.From, r.To, r.BlockExp = hexHash(h.sieveRoot), Num(h.lo.String()), Num(h.hi.String()), h.e
	t := &h.tot
	r.Counts = &RangeCounts{Sieve: Num(t.counts[cSieve].String()), Join: Num(t.counts[cJoin].String()), Search: Num(t.counts[cSearch].String()),
		Small: Num(t.counts[cSmall].String()), Cycle: Num(t.counts[cCycle].String()), Undecided: Num(t.counts[cUndecided].String()),
		StoppingTimeSum: Num(t.sum.String())}
	r.Ceiling = h.ceiling
	r.Counts.Rules = []RuleReport{}
	for i, x := range h.rules {
		rr := RuleReport{Class: fmt.Sprintf("%d*q+%d", x.m, x.c), Predecessor: fmt.Sprintf("%d*q+%d", x.mp, x.cp), Steps: x.steps, Numbers: "0"}
		if i < len(t.rules) {
			rr.Numbers = Num(t.rules[i].String())
		}
		r.Counts.Rules = append(r.Counts.Rules, rr)
	}
	r.Records, r.MaxStoppingTime, r.Cycles = describeSummary(t)
	r.Undecided = []Num{}
}

// tally is what the verified claims add up to.
type tally struct {
	survivors uint64   // classes open at depth j
	closed    []uint64 // closed[t]
	stubs     int
	joined    uint64 // joins verified
	allJoins  bool   // every chunk was read, so joined is the whole count
	done      int    // chunks below the top verified
	flags     [][]uint64
}

type result struct {
	w  *walk
	fl *Failure
}

// checkChunks reads every chunk in order and verifies them in parallel.
// Results are taken in file order, so the failure reported is always the
// first one in the file, whatever the number of workers.
func (sv *sieve) checkChunks(f *file, workers int, progress func(done, total int)) (tally, *Failure) {
	t := tally{closed: make([]uint64, sv.j+1), allJoins: sv.h.joins}
	rec, fl := f.record()
	if fl != nil {
		return t, fl
	}
	if fl := sv.leaf(f, 0, rec); fl != nil {
		return t, fl
	}
	top, fl := sv.checkChunk(0, rec, nil, f.offsets[0], nil, f.records-1)
	if fl != nil {
		return t, fl
	}
	t.add(top)
	t.stubs = len(top.stubs)
	if len(top.stubs) != f.records-1 {
		return t, invalid(ReasonCount, Where{Claim: "chunks", Expected: strconv.Itoa(len(top.stubs) + 1), Found: strconv.Itoa(f.records)},
			"the header declares %d chunks below the top; the top of the trie has %d classes open at depth %d", f.records-1, len(top.stubs), sv.d)
	}

	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	var m *memo
	if sv.useMemo {
		m = sv.newMemo()
	}
	type job struct {
		i   int
		rec []byte
		out chan result
	}
	jobs := make(chan job, workers)
	queue := make(chan chan result, 4*workers)
	stop := make(chan struct{})
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for jb := range jobs {
				if fl := sv.leaf(f, jb.i, jb.rec); fl != nil {
					jb.out <- result{fl: fl}
					continue
				}
				w, fl := sv.checkChunk(jb.i, jb.rec, &top.stubs[jb.i-1], f.offsets[jb.i], m, 0)
				jb.out <- result{w: w, fl: fl}
			}
		}()
	}
	go func() { // the reader: records in file order
		defer close(queue)
		defer close(jobs)
		for i := 1; i <= f.records; i++ {
			select {
			case <-stop:
				return
			default:
			}
			out := make(chan result, 1)
			select {
			case queue <- out:
			case <-stop:
				return
			}
			rec, fl := f.record() // i == f.records: the end, checked for trailing bytes
			if fl != nil || i == f.records {
				out <- result{fl: fl}
				return
			}
			jobs <- job{i: i, rec: rec, out: out}
		}
	}()
	var first *Failure
	for out := range queue {
		res := <-out
		if first == nil && res.fl != nil {
			first = res.fl
			close(stop)
		}
		if first == nil && res.w != nil {
			t.add(res.w)
			if sv.keepJoins {
				t.flags = append(t.flags, res.w.flags)
			}
			if t.done++; progress != nil {
				progress(t.done, f.records-1)
			}
		}
	}
	wg.Wait()
	return t, first
}

// leaf compares the hash of record i with leaf i+1 of the stored tree.
func (sv *sieve) leaf(f *file, i int, rec []byte) *Failure {
	if got := leafHash(rec); got != f.tree[0][i+1] {
		c := i
		return invalid(ReasonHash, Where{Chunk: &c, Offset: &f.offsets[i], Expected: short(f.tree[0][i+1]), Found: short(got)},
			"the chunk hashes to %s; the stored tree says %s", short(got), short(f.tree[0][i+1]))
	}
	return nil
}

func (t *tally) add(w *walk) {
	t.survivors += w.survivors
	t.joined += w.joined
	for i, c := range w.closed {
		t.closed[i] += c
	}
}

// checkCounts compares the header's counts with what the verified claims
// add up to.
func (sv *sieve) checkCounts(t tally) *Failure {
	h := sv.h
	got := t.survivors << (h.k - h.j)
	if got != h.survivors {
		return invalid(ReasonCount, Where{Claim: "survivors", Expected: strconv.FormatUint(got, 10), Found: strconv.FormatUint(h.survivors, 10)},
			"the header counts %d survivors mod 2^%d; the chunks hold %d", h.survivors, h.k, got)
	}
	if t.allJoins && t.joined != h.joined {
		return invalid(ReasonCount, Where{Claim: "joined survivors", Expected: strconv.FormatUint(t.joined, 10), Found: strconv.FormatUint(h.joined, 10)},
			"the header counts %d joined survivors; the chunks hold %d joins", h.joined, t.joined)
	}
	for s := 1; s <= h.j; s++ {
		if t.closed[s] != h.closedAt[s-1] {
			return invalid(ReasonCount, Where{Claim: fmt.Sprintf("classes closing at step %d", s), Step: s,
				Expected: strconv.FormatUint(t.closed[s], 10), Found: strconv.FormatUint(h.closedAt[s-1], 10)},
				"the header counts %d classes closing at step %d; the chunks hold %d", h.closedAt[s-1], s, t.closed[s])
		}
	}
	return nil
}
