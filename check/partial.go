package check

import "strconv"

// Checking part of a sieve: a shard file, or one share of a whole
// certificate checked with -shard. The checker then cannot add up the
// counts from the chunks, so it derives them itself from the table of
// (depth, odd steps) pairs, and it derives the stubs from the map instead
// of reading them from the top chunk.

// Span is share I of N of a certificate's records (SPEC.md, section 7).
type Span struct{ I, N int }

// SpanReport says which records a partial check re-derived.
type SpanReport struct {
	Index int `json:"index"`
	Of    int `json:"of"`
	First int `json:"first"`
	Count int `json:"count"`
}

func spanOf(s Span, records int) (from, upto int) {
	return int(int64(s.I) * int64(records) / int64(s.N)), int(int64(s.I+1) * int64(records) / int64(s.N))
}

// stubList walks the top of the trie by the map's arithmetic and returns
// the classes open at depth d, in the order of the codes, stopping after
// max of them: the caller expects fewer, so the list never grows beyond
// what the file's own record count allows.
func (sv *sieve) stubList(max int) []stubState {
	var out []stubState
	var walk func(t, s int, v, res uint64)
	walk = func(t, s int, v, res uint64) {
		if len(out) >= max {
			return
		}
		if t == sv.d {
			out = append(out, stubState{res: res, s: s, v: v})
			return
		}
		for c := uint64(0); c < 2; c++ {
			vc := v + c*sv.apow[s]
			if vc&1 == 0 && sv.closesAt(t+1, s) {
				continue
			}
			nv, ns := sv.step(vc, s)
			walk(t+1, ns, nv, res|c<<t)
		}
	}
	walk(0, 0, 0, 0)
	return out
}

// countsByTable counts, over (depth, odd steps) pairs, the classes open at
// depth j and the classes closing at each step: whether a class closes
// depends only on its pair.
func (sv *sieve) countsByTable() (open uint64, closed []uint64) {
	closed = make([]uint64, sv.j+1)
	cur := []uint64{1}
	for t := 0; t < sv.j; t++ {
		next := make([]uint64, len(cur)+1)
		for s, n := range cur {
			if sv.closesAt(t+1, s) {
				closed[t+1] += n // the even child closes
			} else {
				next[s] += n
			}
			next[s+1] += n
		}
		cur = next
	}
	for _, n := range cur {
		open += n
	}
	return open, closed
}

// checkSievePart checks a sieve shard, or a share of a whole sieve: every
// record's hash, the claims of the records [from, upto) of the file, the
// header's counts by the table and its exceptions.
func (sv *sieve) checkSievePart(f *file, base, from, upto int, progress func(done, total int)) *Failure {
	open, closed := sv.countsByTable()
	t := tally{survivors: open, closed: closed}
	if fl := sv.checkCounts(t); fl != nil {
		return fl
	}
	whole := f.records
	if f.shard != nil {
		whole = f.shard.wholeRecords
	}
	stubs := sv.stubList(whole)
	if len(stubs) != whole-1 {
		return invalid(ReasonCount, Where{Claim: "chunks", Expected: atLeast(len(stubs)+1, whole+1), Found: strconv.Itoa(whole)},
			"the header declares %d chunks below the top; the map has %s classes open at depth %d", whole-1, atLeast(len(stubs), whole), sv.d)
	}
	var m *memo
	if sv.useMemo {
		m = sv.newMemo()
	}
	for i := 0; ; i++ {
		rec, fl := f.record()
		if fl != nil {
			return fl
		}
		if rec == nil {
			break
		}
		if fl := sv.leaf(f, i, rec); fl != nil {
			return fl
		}
		g := base + i
		if i < from || i >= upto {
			// Outside the share: decoded, not judged (SPEC.md, section 3).
			if fl := sv.grammar(g, rec, f.offsets[i]); fl != nil {
				return fl
			}
			continue
		}
		if g == 0 {
			_, fl = sv.checkChunk(0, rec, nil, f.offsets[i], nil, len(stubs))
		} else {
			_, fl = sv.checkChunk(g, rec, &stubs[g-1], f.offsets[i], m, 0)
		}
		if fl != nil {
			return fl
		}
		if progress != nil {
			progress(i+1-from, upto-from)
		}
	}
	if fl := sv.checkExceptions(); fl != nil {
		return fl
	}
	return nil
}

func (r *Report) describeShard(f *file) {
	s := f.shard
	r.Kind += " shard"
	r.Shard = &SpanReport{Index: s.index, Of: s.of, First: s.first, Count: s.count}
}
