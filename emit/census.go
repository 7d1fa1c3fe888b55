package emit

import (
	"context"
	"fmt"
	"io"
	"math/big"
	"runtime"
	"sync"

	"golang.org/x/sync/errgroup"

	"descent/cert"
)

// CensusParams names a census certificate (SPEC.md, section 12): the map,
// the range [Lo, Hi), the block exponent E (0 picks DefaultCensusBlock),
// the step cap C and the ceiling W (0 picks the defaults).
type CensusParams struct {
	Map     cert.Map
	Lo, Hi  *big.Int
	E       int
	Cap     uint32
	Ceiling int
}

// CensusOptions tune a run without changing its output.
type CensusOptions struct {
	Workers int
	// Done holds the records of blocks already completed by an earlier run
	// of the same parameters, in order; the run goes on after them.
	Done [][]byte
	// Block is called with each newly completed block record, in order.
	Block func(rec []byte) error
	// Progress is called after each block with the blocks done and the
	// numbers covered so far.
	Progress func(done, total int, numbers *big.Int)
	// Shard, if set, writes only this shard: its blocks, under the whole's
	// header with empty totals (merge adds them up).
	Shard *Shard
	// MemoBits, if set, makes the memo cover the numbers below 2^MemoBits
	// (at least 2^16) instead of the size chosen from the range. The bytes
	// written do not depend on it.
	MemoBits int
}

// CensusResult describes a written census certificate.
type CensusResult struct {
	Header *cert.CensusHeader
	Root   cert.Hash
	Size   int64
}

// DefaultCensusBlock is the block exponent when none is given: blocks of
// 2^24 numbers, a block a reviewer can re-derive alone in seconds.
const DefaultCensusBlock = 24

// Memo sizes: every x below 2^censusSmallBits has an entry, and the memo
// covers at most 2^censusMemoBits numbers, with an entry for every odd one
// (1 GiB).
const (
	censusSmallBits = 16
	censusMemoBits  = 29
	censusPiece     = 1 << 18 // numbers per piece of work
)

// NormalizeCensus fills in defaults and checks the parameters.
func NormalizeCensus(p *CensusParams) error {
	if err := p.Map.Validate(); err != nil {
		return err
	}
	if p.E == 0 {
		p.E = DefaultCensusBlock
	}
	if p.Cap == 0 {
		p.Cap = DefaultRangeCap
	}
	switch {
	case p.Lo == nil || p.Hi == nil || p.Lo.Sign() <= 0 || p.Lo.Cmp(p.Hi) >= 0:
		return fmt.Errorf("range [%v, %v): want 1 <= from < to", p.Lo, p.Hi)
	case p.Hi.BitLen() > 8*cert.MaxNatBytes:
		return fmt.Errorf("to = %v: the format carries numbers of at most %d bits", p.Hi, 8*cert.MaxNatBytes)
	case !cert.CensusSpanOK(p.Lo, p.Hi):
		return fmt.Errorf("range [%v, %v): a census covers fewer than 2^64 numbers", p.Lo, p.Hi)
	case p.E < cert.MinCensusBlockExp || p.E > cert.MaxCensusBlockExp:
		return fmt.Errorf("block exponent %d: want %d to %d", p.E, cert.MinCensusBlockExp, cert.MaxCensusBlockExp)
	case p.Cap < 1 || p.Cap > cert.MaxCap:
		return fmt.Errorf("cap %d: want 1 to %d", p.Cap, cert.MaxCap)
	}
	if p.Ceiling == 0 {
		p.Ceiling = cert.DefaultCensusCeiling(p.Hi)
	}
	if p.Ceiling < cert.MinCeiling || p.Ceiling > cert.MaxCeiling {
		return fmt.Errorf("ceiling %d bits: want %d to %d", p.Ceiling, cert.MinCeiling, cert.MaxCeiling)
	}
	if p.Hi.Cmp(new(big.Int).Lsh(big.NewInt(1), uint(p.Ceiling))) > 0 {
		return fmt.Errorf("ceiling %d bits: every number of the range must lie below 2^W (want W >= %d)", p.Ceiling, new(big.Int).Sub(p.Hi, big.NewInt(1)).BitLen())
	}
	if _, n := cert.BlockSpan(p.Lo, p.Hi, p.E); !n.IsInt64() || n.Int64() > cert.MaxRecords {
		return fmt.Errorf("the range has %v blocks of 2^%d; the format allows %d: use a larger -block", n, p.E, cert.MaxRecords)
	}
	return nil
}

func censusHeader(p CensusParams, blocks int, t cert.CensusSummary) *cert.CensusHeader {
	return &cert.CensusHeader{Map: p.Map, Cap: p.Cap, Ceiling: p.Ceiling, E: p.E, Lo: p.Lo, Hi: p.Hi, Blocks: blocks, Totals: t}
}

// memoBits picks the memo's size: below 2^censusMemoBits, every number
// under half of hi, so that the numbers of the range all fall onto it
// within their wave (those of the last wave [P, 2P) need no entries of
// their own, as nothing falls onto them later); otherwise about the
// range's width, so that a block far from 1 costs about its own numbers.
func memoBits(p CensusParams, override int) int {
	most := censusMemoBits
	if override > 0 {
		return min(max(override, censusSmallBits), most)
	}
	top := new(big.Int).Sub(p.Hi, big.NewInt(1)).BitLen() - 1
	if top <= most {
		return max(top, censusSmallBits)
	}
	width := new(big.Int).Sub(p.Hi, p.Lo)
	return min(max(width.Sub(width, big.NewInt(1)).BitLen(), censusSmallBits+4), most)
}

// censusRun is one run of the census over the blocks [from, upto).
type censusRun struct {
	c      *censor
	p      CensusParams
	first  *big.Int // the index of block 0's interval
	total  int
	from   int // the first block this run writes
	start  int // the first block this run computes (after those resumed)
	upto   int
	o      CensusOptions
	mu     sync.Mutex
	blocks []*blockState // by block - start
	next   int           // the next block to hand on, by block - start
	recs   [][]byte
	totals *censusTotals
	cover  *big.Int
}

type blockState struct {
	pending int
	units   []*censusAcc
}

// Census computes the census of [Lo, Hi) and writes the certificate to w.
func Census(ctx context.Context, w io.WriterAt, p CensusParams, o CensusOptions) (*CensusResult, error) {
	if err := NormalizeCensus(&p); err != nil {
		return nil, err
	}
	first, nblocks := cert.BlockSpan(p.Lo, p.Hi, p.E)
	total := int(nblocks.Int64())
	r := &censusRun{p: p, first: first, total: total, upto: total, o: o, totals: newCensusTotals(), cover: new(big.Int)}
	r.c = newCensor(p.Map, p.Cap, p.Ceiling, newMeter(ctx), 1<<censusSmallBits)
	var cw *cert.Writer
	if o.Shard != nil {
		hb, err := censusHeader(p, total, cert.CensusSummary{}).Marshal()
		if err != nil {
			return nil, err
		}
		var count int
		if cw, r.from, count, err = shardWriter(w, cert.KindCensus, hb, total, o.Shard); err != nil {
			return nil, err
		}
		r.upto = r.from + count
	}
	if len(o.Done) > r.upto-r.from {
		return nil, fmt.Errorf("%d completed blocks for a run of %d", len(o.Done), r.upto-r.from)
	}
	for i, rec := range o.Done {
		b, err := cert.ParseCensusBlock(rec, 0)
		if err == nil {
			err = censusHeader(p, total, cert.CensusSummary{}).CheckCensusBlockSpan(b, r.from+i, 0)
		}
		if err != nil {
			return nil, fmt.Errorf("completed block %d from an earlier run is damaged or of another run: %v", r.from+i, err)
		}
		r.keep(r.from+i, rec, b)
	}
	r.start = r.from + len(o.Done)
	if err := r.compute(ctx); err != nil {
		return nil, err
	}
	h := censusHeader(p, total, r.totals.summary())
	if cw == nil {
		hb, err := h.Marshal()
		if err != nil {
			return nil, err
		}
		if cw, err = cert.NewWriter(w, hb); err != nil {
			return nil, err
		}
	}
	for _, rec := range r.recs {
		if err := cw.WriteRecord(rec, cert.LeafHash(rec)); err != nil {
			return nil, err
		}
	}
	root, size, err := cw.Close()
	if err != nil {
		return nil, err
	}
	return &CensusResult{Header: h, Root: root, Size: size}, nil
}

// keep adds a finished block to the certificate and the totals.
func (r *censusRun) keep(i int, rec []byte, b *cert.CensusBlock) {
	r.recs = append(r.recs, rec)
	r.totals.add(b)
	lo, hi := r.bounds(i)
	r.cover.Add(r.cover, hi.Sub(hi, lo))
	if r.o.Progress != nil {
		r.o.Progress(i+1-r.from, r.upto-r.from, r.cover)
	}
}

// blockStart is the first number of block i's aligned interval.
func (r *censusRun) blockStart(i int) *big.Int {
	x0 := new(big.Int).Add(r.first, big.NewInt(int64(i)))
	return x0.Lsh(x0, uint(r.p.E))
}

// bounds returns the numbers of block i: [lo, hi).
func (r *censusRun) bounds(i int) (lo, hi *big.Int) {
	x0 := r.blockStart(i)
	lo = maxBig(x0, r.p.Lo)
	hi = x0.Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(r.p.E)))
	if hi.Cmp(r.p.Hi) > 0 {
		hi.Set(r.p.Hi)
	}
	return lo, hi
}

// censusUnit is a piece of work: the numbers [x0+from, x0+to) of one
// block, or (block < 0) numbers [from, to) below the memo's bound whose
// memo entries are needed but whose census is not.
type censusUnit struct {
	block    int
	slot     int
	x0       *big.Int
	from, to uint64
	floor    uint64 // the numbers fall below it onto finished memo entries
	memo     bool   // write the memo entries of the stored numbers
}

// compute runs the census of the blocks [start, upto), in waves: first the
// memo entries below 2^16, one by one; then the numbers in [P, 2P) for P =
// 2^16, 2^17, ... below the memo's bound, each falling below P onto
// entries of earlier waves; then the blocks above the bound, falling below
// it. Within a wave the pieces run in parallel.
func (r *censusRun) compute(ctx context.Context) error {
	if r.start >= r.upto {
		return nil
	}
	c := r.c
	small := uint64(1) << censusSmallBits
	bound := uint64(1) << memoBits(r.p, r.o.MemoBits)
	c.allocMemo(bound)
	if err := c.fillSmall(); err != nil {
		return err
	}
	// The numbers to census: from the first block to compute to the last.
	lo, _ := r.bounds(r.start)
	_, hi := r.bounds(r.upto - 1)
	r.blocks = make([]*blockState, r.upto-r.start)
	for i := range r.blocks {
		r.blocks[i] = &blockState{}
	}
	var waves [][]*censusUnit
	add := func(wave int, u *censusUnit) {
		for len(waves) <= wave {
			waves = append(waves, nil)
		}
		if u.block >= 0 {
			st := r.blocks[u.block-r.start]
			u.slot = len(st.units)
			st.units = append(st.units, nil)
			st.pending++
		}
		waves[wave] = append(waves[wave], u)
	}
	// Census pieces: aligned to blocks and to censusPiece; the wave of a
	// piece below the bound is that of its numbers.
	bigBound := new(big.Int).SetUint64(bound)
	for i := r.start; i < r.upto; i++ {
		blo, bhi := r.bounds(i)
		x0 := r.blockStart(i)
		for s := new(big.Int).Set(blo); s.Cmp(bhi) < 0; {
			e := r.pieceEnd(s, bhi, bigBound)
			u := &censusUnit{block: i, x0: x0, from: new(big.Int).Sub(s, x0).Uint64(), to: new(big.Int).Sub(e, x0).Uint64()}
			wave := 0
			if s.Cmp(bigBound) >= 0 {
				u.floor = bound
				wave = 1 + censusMemoBits
			} else if su := s.Uint64(); su >= small {
				u.floor = uint64(1) << (bitLen64(su) - 1)
				u.memo = true
				wave = bitLen64(su) - censusSmallBits
			} else {
				u.floor = small // read from the small memo directly
			}
			add(wave, u)
			s = e
		}
	}
	// Memo pieces: every wave's numbers not censused.
	for P := small; P < bound; P *= 2 {
		wave := bitLen64(P) - censusSmallBits
		for _, gap := range gaps(P, 2*P, lo, hi) {
			for s := gap[0]; s < gap[1]; s += min(censusPiece, gap[1]-s) {
				add(wave, &censusUnit{block: -1, from: s, to: min(s+censusPiece, gap[1]), floor: P, memo: true})
			}
		}
	}
	workers := r.o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	for _, wave := range waves {
		c.setJumpMin() // every cycle with its smallest member below this wave is found
		eg, ectx := errgroup.WithContext(ctx)
		eg.SetLimit(workers)
		for _, u := range wave {
			eg.Go(func() error {
				if err := ectx.Err(); err != nil {
					return err
				}
				acc, err := r.run(u)
				if err != nil {
					return err
				}
				if u.block >= 0 {
					return r.finish(u, acc)
				}
				return nil
			})
		}
		if err := eg.Wait(); err != nil {
			return err
		}
		if err := ctx.Err(); err != nil {
			return err
		}
	}
	if r.next != len(r.blocks) {
		return fmt.Errorf("census: %d of %d blocks finished", r.next, len(r.blocks))
	}
	return c.work.failed()
}

func bitLen64(x uint64) int { return new(big.Int).SetUint64(x).BitLen() }

// pieceEnd is where the piece of a block that starts at s ends: at the
// block's end hi, the next multiple of censusPiece, and, below the memo's
// bound, the end of s's wave [P, 2P) or of the small numbers.
func (r *censusRun) pieceEnd(s, hi, bound *big.Int) *big.Int {
	unit := big.NewInt(censusPiece)
	e := new(big.Int).Div(s, unit)
	e.Add(e, big.NewInt(1)).Mul(e, unit)
	if s.Cmp(bound) < 0 {
		su := s.Uint64()
		w := uint64(1) << censusSmallBits
		if su >= w {
			w = uint64(1) << bitLen64(su)
		}
		if wb := new(big.Int).SetUint64(min(w, bound.Uint64())); wb.Cmp(e) < 0 {
			e = wb
		}
	}
	if hi.Cmp(e) < 0 {
		e.Set(hi)
	}
	return e
}

// gaps returns the parts of [a, b) outside [lo, hi).
func gaps(a, b uint64, lo, hi *big.Int) [][2]uint64 {
	var out [][2]uint64
	l, h := a, b
	if lo.IsUint64() && lo.Uint64() > a {
		l = min(lo.Uint64(), b)
	} else if !lo.IsUint64() {
		l = b
	}
	if l > a {
		out = append(out, [2]uint64{a, l})
	}
	if hi.IsUint64() && hi.Uint64() < b {
		h = max(hi.Uint64(), a)
		out = append(out, [2]uint64{h, b})
	}
	return out
}

// run computes one piece. The numbers go through the fast path in
// batches: first each one's landing on the memo, then the reads of the
// entries, which miss the caches and overlap when nothing else stands
// between them, then the rest.
func (r *censusRun) run(u *censusUnit) (*censusAcc, error) {
	c := r.c
	var acc *censusAcc
	var x0 uint64
	if u.block >= 0 {
		acc = &censusAcc{}
		end := new(big.Int).Add(u.x0, new(big.Int).SetUint64(u.to))
		if end.BitLen() > 64 {
			// Beyond 64 bits every number takes the exact path.
			for off := u.from; off < u.to; off++ {
				n := new(big.Int).Add(u.x0, new(big.Int).SetUint64(off))
				f := c.exactFate(n)
				if err := c.work.failed(); err != nil {
					return nil, err
				}
				r.note(acc, off, 0, n, f, f.peakBitLen())
			}
			return acc, nil
		}
		x0 = u.x0.Uint64()
	}
	const batch = 256
	var (
		ns   [batch]uint64
		land [batch]struct {
			idx, d, h uint64
			pk        u128
			ok        bool
		}
		es [batch]uint32
	)
	n, end := x0+u.from, x0+u.to
	for n < end {
		if err := c.work.ctx.Err(); err != nil {
			return nil, err
		}
		k := 0
		for ; k < batch && n < end; n++ {
			if acc == nil && !c.stored(n) { // a memo piece needs only the stored numbers
				continue
			}
			ns[k] = n
			l := &land[k]
			l.idx, l.d, l.h, l.pk, l.ok = c.land(n, u.floor)
			k++
		}
		for i := range k {
			if land[i].ok {
				es[i] = c.mem[land[i].idx]
			}
		}
		for i := range k {
			m, l := ns[i], &land[i]
			// The fast path's own combine, written out: most numbers
			// end here.
			if e := es[i]; l.ok && e&0xfff != 0 && e&0xfff != eUndecided {
				d, h := l.d+uint64(e&0xfff)-1, l.h+uint64(e>>12&0x7ff)
				if d <= c.cap {
					pb := int(e >> 23 & 0x7f)
					if pb >= ePeakBitsOK {
						pb = peakUnknown
					}
					pb = max(pb, l.pk.bitLen())
					cyc := int(e >> 30)
					if u.memo && c.stored(m) {
						c.mem[c.index(m)] = packEntry(fate{decided: true, cyc: cyc, d: d, h: h}, pb)
					}
					if acc != nil {
						ca := acc.cycle(cyc)
						if ca.add(m-x0, d, h, pb) {
							ca.path(m-x0, c.peakOf(new(big.Int).SetUint64(m), d))
						}
					}
					continue
				}
			}
			var f fate
			var pb int
			ok := l.ok
			if ok {
				f, pb, ok = c.combine(es[i], l.d, l.h, l.pk)
			}
			if !ok {
				f = c.exactFate(new(big.Int).SetUint64(m))
				pb = f.peakBitLen()
			}
			if u.memo && c.stored(m) {
				c.put(m, packEntry(f, pb))
			}
			if acc != nil {
				r.note(acc, m-x0, m, nil, f, pb)
			}
		}
	}
	return acc, c.work.failed()
}

func (f fate) peakBitLen() int {
	if f.peak == nil {
		return 0
	}
	return f.peak.BitLen()
}

// note adds the fate of the number at offset off, which is n (nBig when
// it is beyond 64 bits), to acc.
func (r *censusRun) note(acc *censusAcc, off, n uint64, nBig *big.Int, f fate, pb int) {
	if !f.decided {
		acc.nUndec++
		if len(acc.undec) <= cert.MaxCensusUndecided { // one more than a block may list: enough to refuse it
			acc.undec = append(acc.undec, off)
		}
		return
	}
	if ca := acc.cycle(f.cyc); ca.add(off, f.d, f.h, pb) {
		p := f.peak
		if p == nil {
			if nBig == nil {
				nBig = new(big.Int).SetUint64(n)
			}
			p = r.c.peakOf(nBig, f.d)
		}
		ca.path(off, p)
	}
}

// finish files a finished piece and hands on, in order, every block whose
// pieces are all finished.
func (r *censusRun) finish(u *censusUnit, acc *censusAcc) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	st := r.blocks[u.block-r.start]
	st.units[u.slot] = acc
	st.pending--
	for r.next < len(r.blocks) && r.blocks[r.next].pending == 0 {
		i := r.start + r.next
		st := r.blocks[r.next]
		total := &censusAcc{}
		for _, a := range st.units {
			total.merge(a)
		}
		r.blocks[r.next] = nil
		r.next++
		if total.nUndec > cert.MaxCensusUndecided {
			return fmt.Errorf("block %d has %d undecided numbers, more than a block may list (%d): raise -cap or -ceiling, or use smaller blocks",
				i, total.nUndec, cert.MaxCensusUndecided)
		}
		b := total.block(uint32(i), r.blockStart(i), r.c.cycles.snapshot())
		rec, err := b.Marshal()
		if err != nil {
			return err
		}
		if r.o.Block != nil {
			if err := r.o.Block(rec); err != nil {
				return err
			}
		}
		r.keep(i, rec, b)
	}
	return nil
}
