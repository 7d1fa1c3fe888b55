// Package emit computes what a certificate claims and writes it in the
// format of package cert: the residue-class sieve mod 2^k, its closing
// classes, survivors and exceptions. It trusts nothing it has not computed
// and checks its own walk against an independent count before it finishes;
// the real check is package check's.
package emit

import (
	"context"
	"fmt"
	"io"
	"runtime"

	"golang.org/x/sync/errgroup"

	"descent/cert"
)

// SieveParams names a sieve: the map, the modulus exponent k, the step
// budget j <= k and the step cap for deciding the exceptions' fates.
type SieveParams struct {
	Map  cert.Map
	K, J int
	Cap  uint32
	// Ceiling is W, in bits: a fate stops, undecided, at an iterate of 2^W
	// or more. 0 picks cert.DefaultCeiling of the exception bound's bit
	// length.
	Ceiling int
	Joins   bool // list joined survivors (needs J = K; SPEC.md, section 8)
}

// DefaultCap is the step cap for exceptions' fates when none is given
// (common practice, no source: generous for every known cycle of the maps
// in use, and a few hundred milliseconds for an orbit that never settles).
const DefaultCap = 100000

// Options tune a run without changing its output.
type Options struct {
	Workers  int                   // parallel chunk encoders; 0 means GOMAXPROCS
	Progress func(done, total int) // called after each chunk is written
	Shard    *Shard                // if set, write only this shard of the certificate
	// joined, if set for a sieve with joins, receives the join flags of
	// every chunk's survivors (joinFlags' form), so that a range on the
	// sieve need not walk it again.
	joined *[][]uint64
}

// Shard names shard I of N (SPEC.md, section 7): the records
// cert.ShardSpan(I, N, R) of the whole.
type Shard struct{ I, N int }

// shardWriter starts a shard file holding records [first, first+count)
// of a whole certificate with header whole.
func shardWriter(w io.WriterAt, kind byte, whole []byte, records int, sh *Shard) (*cert.Writer, int, int, error) {
	if sh.N < 1 || sh.I < 0 || sh.I >= sh.N {
		return nil, 0, 0, fmt.Errorf("shard %d/%d: want 0 <= i < n", sh.I, sh.N)
	}
	if sh.N > records {
		return nil, 0, 0, fmt.Errorf("%d shards of a certificate of %d records: at most one shard per record", sh.N, records)
	}
	first, count := cert.ShardSpan(sh.I, sh.N, records)
	h := &cert.ShardHeader{Whole: kind, Index: sh.I, Of: sh.N, First: first, Count: count, WholeHeader: whole}
	hb, err := h.Marshal()
	if err != nil {
		return nil, 0, 0, err
	}
	cw, err := cert.NewWriter(w, hb)
	return cw, first, count, err
}

// Result describes a written certificate.
type Result struct {
	Header *cert.SieveHeader
	Root   cert.Hash
	Size   int64
}

type stub struct {
	idx int // its place among the stubs, in depth-first order
	res uint64
	s   int
	v   uint64
	out chan chunkOut
}

type chunkOut struct {
	rec   []byte
	leaf  cert.Hash
	tally tally
}

// Sieve writes the sieve certificate for p to w. The bytes depend only on p.
func Sieve(ctx context.Context, w io.WriterAt, p SieveParams, o Options) (*Result, error) {
	r, err := newRules(p.Map, p.K, p.J)
	if err != nil {
		return nil, err
	}
	r.work = newMeter(ctx)
	if p.Cap == 0 {
		p.Cap = DefaultCap
	}
	if p.Ceiling == 0 {
		p.Ceiling = cert.DefaultCeiling(r.exceptionBound().BitLen())
	}
	if p.Ceiling < cert.MinCeiling || p.Ceiling > cert.MaxCeiling {
		return nil, fmt.Errorf("ceiling %d bits: want %d to %d", p.Ceiling, cert.MinCeiling, cert.MaxCeiling)
	}
	r.ceiling = p.Ceiling
	h, err := r.header(p.Cap)
	if err != nil {
		return nil, err
	}
	d := cert.SplitDepth(r.j)
	levels := min(bottomLevels, r.j-d)
	table := buildBottom(r, levels)
	var jf *joinFinder
	if p.Joins {
		if r.j != r.k {
			return nil, fmt.Errorf("joins need j = k (here j = %d, k = %d)", r.j, r.k)
		}
		if jf, err = newJoinFinder(r); err != nil {
			return nil, err
		}
		h.Joins = true
		// The header counts the joined survivors. A whole certificate
		// learns the count as it goes and rewrites its header at the end;
		// a shard's header must name it first, so a shard counts them all.
		if o.Shard != nil {
			if h.Joined, err = jf.count(ctx, o.Workers, table, levels); err != nil {
				return nil, err
			}
		}
	}
	hb, err := h.Marshal()
	if err != nil {
		return nil, err
	}
	// Records [first, last) are written: all of them, or a shard's.
	first, last := 0, h.Chunks
	var cw *cert.Writer
	if o.Shard != nil {
		var count int
		kind := byte(cert.KindSieve)
		if h.Joins {
			kind = cert.KindJoins
		}
		cw, first, count, err = shardWriter(w, kind, hb, h.Chunks, o.Shard)
		last = first + count
	} else {
		cw, err = cert.NewWriter(w, hb)
	}
	if err != nil {
		return nil, err
	}
	want := func(rec int) bool { return rec >= first && rec < last }

	total := newTally(r.j)

	// Chunk 0: the top of the trie. Its stubs are generated again below,
	// lazily, so that no list of them is ever held.
	top := encoder{r: r, end: d, tb: -1, tally: newTally(r.j)}
	if err := top.top(0, 0, 0, 0); err != nil {
		return nil, err
	}
	if want(0) {
		rec := cert.Chunk{From: 0, To: d, NBits: top.w.Len(), Payload: top.w.Bytes()}.Marshal()
		if err := cw.WriteRecord(rec, cert.LeafHash(rec)); err != nil {
			return nil, err
		}
	}
	if o.joined != nil && p.Joins {
		*o.joined = make([][]uint64, top.tally.open)
	}
	top.tally.open = 0 // the stubs are not survivors; their subtrees count
	total.add(top.tally)

	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}

	g, ctx := errgroup.WithContext(ctx)
	jobs := make(chan stub, 4*workers)
	order := make(chan chan chunkOut, 8*workers)
	g.Go(func() error { // the generator: stubs in depth-first order
		defer close(jobs)
		defer close(order)
		gen := encoder{r: r, end: d, tb: -1, tally: newTally(r.j)}
		rec := 0
		gen.stub = func(res uint64, s int, v uint64) error {
			if rec++; !want(rec) {
				return nil
			}
			st := stub{idx: rec - 1, res: res, s: s, v: v, out: make(chan chunkOut, 1)}
			if !trySend(ctx, order, st.out) || !trySend(ctx, jobs, st) {
				return ctx.Err()
			}
			return nil
		}
		return gen.top(0, 0, 0, 0)
	})
	for range workers {
		g.Go(func() error {
			for st := range jobs {
				e := encoder{r: r, end: r.j, tb: r.j - levels, mask: 1<<levels - 1, table: table, tally: newTally(r.j)}
				var jw *cert.JoinWriter
				if jf != nil {
					jw = jf.chunk(&e, st, d)
				} else {
					e.node(d, st.s, st.v)
				}
				if e.w.Len() >= 1<<32 || e.w.Len()/8 > cert.MaxRecordBytes-64 {
					return fmt.Errorf("the chunk below class %d mod 2^%d has %d code bits, more than a record holds", st.res, d, e.w.Len())
				}
				rec := cert.Chunk{Residue: st.res, From: d, To: r.j, NBits: e.w.Len(), Payload: e.w.Bytes()}.Marshal()
				if jw != nil {
					if e.tally.open > cert.MaxJoinSurvivors {
						return fmt.Errorf("the chunk below class %d mod 2^%d has %d survivors, more than a chunk with joins may hold (%d)", st.res, d, e.tally.open, cert.MaxJoinSurvivors)
					}
					rec = jw.AppendTo(rec)
					e.tally.joined = jw.Joined()
					if o.joined != nil {
						bits, err := joinBits(jw, e.tally.open)
						if err != nil {
							return err
						}
						(*o.joined)[st.idx] = bits
					}
				}
				st.out <- chunkOut{rec: rec, leaf: cert.LeafHash(rec), tally: e.tally}
			}
			return nil
		})
	}
	g.Go(func() error { // the writer: chunks in order
		done, stubs := 0, last-max(first, 1)
		for out := range order {
			var c chunkOut
			select {
			case c = <-out:
			case <-ctx.Done():
				return ctx.Err()
			}
			if err := cw.WriteRecord(c.rec, c.leaf); err != nil {
				return err
			}
			total.add(c.tally)
			done++
			if o.Progress != nil {
				o.Progress(done, stubs)
			}
		}
		if done != stubs {
			return fmt.Errorf("internal error: the walk found %d classes open at depth %d, the count says %d", done, d, stubs)
		}
		return nil
	})
	if err := g.Wait(); err != nil {
		return nil, err
	}
	if o.Shard == nil { // a shard holds only part of what the counts add up
		if jf != nil {
			h.Joined = total.joined
			hb, err := h.Marshal()
			if err == nil {
				err = cw.SetHeader(hb)
			}
			if err != nil {
				return nil, err
			}
		}
		if err := r.agree(h, total); err != nil {
			return nil, err
		}
	}
	root, size, err := cw.Close()
	if err != nil {
		return nil, err
	}
	return &Result{Header: h, Root: root, Size: size}, nil
}

func trySend[T any](ctx context.Context, ch chan<- T, v T) bool {
	select {
	case ch <- v:
		return true
	case <-ctx.Done():
		return false
	}
}

// MaxSurvivorClasses bounds the survivor classes of a sieve this program
// writes: 2^40 classes make a certificate of about 200 GB and a run of days
// on two cores. The format allows more; the work does not.
const MaxSurvivorClasses = 1 << 40

// header states the claim: counts from the (depth, odd steps) table and the
// exceptions from the exception search.
func (r *rules) header(cap uint32) (*cert.SieveHeader, error) {
	closedAt, openAt := r.counts()
	if n := openAt[r.j]; n > MaxSurvivorClasses {
		return nil, fmt.Errorf("%v with j = %d leaves %d survivor classes mod 2^%d, more than the %d (2^40) this program writes; use a smaller j",
			r.m, r.j, n, r.j, uint64(MaxSurvivorClasses))
	}
	exc, err := r.exceptions(cap)
	if err != nil {
		return nil, err
	}
	return &cert.SieveHeader{
		Map: r.m, K: r.k, J: r.j, Cap: cap, Ceiling: r.ceiling,
		Chunks:     int(openAt[cert.SplitDepth(r.j)]) + 1,
		Survivors:  openAt[r.j] << (r.k - r.j),
		ClosedAt:   closedAt[1:],
		Exceptions: exc,
	}, nil
}

// agree compares what the walk wrote with the header written before it.
func (r *rules) agree(h *cert.SieveHeader, got tally) error {
	if got.open<<(r.k-r.j) != h.Survivors {
		return fmt.Errorf("internal error: the walk wrote %d survivors mod 2^%d, the count says %d", got.open<<(r.k-r.j), r.j, h.Survivors)
	}
	for t := 1; t <= r.j; t++ {
		if got.closed[t] != h.ClosedAt[t-1] {
			return fmt.Errorf("internal error: the walk closed %d classes at step %d, the count says %d", got.closed[t], t, h.ClosedAt[t-1])
		}
	}
	return nil
}
