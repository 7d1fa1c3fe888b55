package emit

import (
	"math/big"
	"sort"

	"descent/cert"
)

// censusAcc gathers the census of consecutive numbers of one block (a
// unit), or of a whole block from its units in order. Numbers are kept as
// offsets from the block's start.
type censusAcc struct {
	cycles []*cycleCensusAcc // by registry index; nil where none
	undec  []uint64          // offsets of the undecided numbers, increasing
	nUndec uint64
}

// cycleCensusAcc is the census of the numbers that reach one cycle.
type cycleCensusAcc struct {
	rows  []heightRow // by d, the steps of T
	first []uint64    // by delay: 1 + the offset of the first number with it; 0 for none
	// The records so far, increasing in offset and value.
	delayRecs []delayPoint
	pathRecs  []pathPoint
	peakBits  int    // bit length of the largest peak so far (0: none yet)
	maxDelay  uint64 // the largest delay so far
}

// heightRow counts, for one d, the numbers of each height h0+i.
type heightRow struct {
	h0     uint64
	counts []uint64
}

type delayPoint struct {
	off   uint64
	delay uint64
}

type pathPoint struct {
	off  uint64
	peak *big.Int
}

func (a *censusAcc) cycle(id int) *cycleCensusAcc {
	for len(a.cycles) <= id {
		a.cycles = append(a.cycles, nil)
	}
	if a.cycles[id] == nil {
		a.cycles[id] = &cycleCensusAcc{}
	}
	return a.cycles[id]
}

// addCount adds count numbers with d steps of T and height h.
func (c *cycleCensusAcc) addCount(d, h, count uint64) {
	for uint64(len(c.rows)) <= d {
		c.rows = append(c.rows, heightRow{})
	}
	r := &c.rows[d]
	switch {
	case len(r.counts) == 0:
		r.h0, r.counts = h, append(r.counts, 0)
	case h < r.h0:
		grown := make([]uint64, r.h0-h+uint64(len(r.counts)))
		copy(grown[r.h0-h:], r.counts)
		r.h0, r.counts = h, grown
	}
	for i := h - r.h0; uint64(len(r.counts)) <= i; {
		r.counts = append(r.counts, 0)
	}
	r.counts[h-r.h0] += count
}

// setFirst notes off as a number with the delay, if it is the first.
func (c *cycleCensusAcc) setFirst(delay, off uint64) {
	for uint64(len(c.first)) <= delay {
		c.first = append(c.first, 0)
	}
	if c.first[delay] == 0 {
		c.first[delay] = off + 1
	}
}

// add counts the decided number at offset off, which must follow every
// number added before, with d steps of T, h of them odd, and a peak below
// 2^peakBits (peakUnknown: unbounded). It reports whether the number may
// be a path record, which it is only if its peak reaches the bit length of
// the largest so far: the caller then works the peak out for path.
func (c *cycleCensusAcc) add(off, d, h uint64, peakBits int) bool {
	if d < uint64(len(c.rows)) {
		r := &c.rows[d]
		if i := h - r.h0; i < uint64(len(r.counts)) { // h < h0 wraps to a large i
			r.counts[i]++
		} else {
			c.addCount(d, h, 1)
		}
	} else {
		c.addCount(d, h, 1)
	}
	delay := d + h
	if delay >= uint64(len(c.first)) || c.first[delay] == 0 {
		c.setFirst(delay, off)
	}
	if delay > c.maxDelay || len(c.delayRecs) == 0 {
		c.delayRecs = append(c.delayRecs, delayPoint{off, delay})
		c.maxDelay = delay
	}
	return peakBits >= c.peakBits
}

// path takes the peak of the number just added, a path record if it
// exceeds every earlier peak.
func (c *cycleCensusAcc) path(off uint64, p *big.Int) {
	if n := len(c.pathRecs); n == 0 || p.Cmp(c.pathRecs[n-1].peak) > 0 {
		c.pathRecs = append(c.pathRecs, pathPoint{off, p})
		c.peakBits = p.BitLen()
	}
}

// merge adds the census of the numbers that follow those of a.
func (a *censusAcc) merge(b *censusAcc) {
	for id, cb := range b.cycles {
		if cb == nil {
			continue
		}
		ca := a.cycle(id)
		for d, r := range cb.rows {
			for i, n := range r.counts {
				if n > 0 {
					ca.addCount(uint64(d), r.h0+uint64(i), n)
				}
			}
		}
		for delay, f := range cb.first {
			if f > 0 {
				ca.setFirst(uint64(delay), f-1)
			}
		}
		for _, p := range cb.delayRecs {
			if len(ca.delayRecs) == 0 || p.delay > ca.maxDelay {
				ca.delayRecs = append(ca.delayRecs, p)
				ca.maxDelay = p.delay
			}
		}
		for _, p := range cb.pathRecs {
			ca.path(p.off, p.peak)
		}
	}
	a.undec = append(a.undec, b.undec...)
	a.nUndec += b.nUndec
}

// block writes the census of block index, whose numbers start at x0, with
// the registry's cycles.
func (a *censusAcc) block(index uint32, x0 *big.Int, cycles []cycleInfo) *cert.CensusBlock {
	abs := func(off uint64) *big.Int { return new(big.Int).Add(x0, new(big.Int).SetUint64(off)) }
	b := &cert.CensusBlock{Index: index}
	for id, c := range a.cycles {
		if c == nil {
			continue
		}
		cc := cert.CycleCensus{Min: cycles[id].min}
		type entry struct{ delay, h, n uint64 }
		var es []entry
		for d, r := range c.rows {
			for i, n := range r.counts {
				if n > 0 {
					h := r.h0 + uint64(i)
					es = append(es, entry{uint64(d) + h, h, n})
				}
			}
		}
		sort.Slice(es, func(i, j int) bool {
			return es[i].delay < es[j].delay || es[i].delay == es[j].delay && es[i].h < es[j].h
		})
		for _, e := range es {
			if k := len(cc.Groups); k == 0 || cc.Groups[k-1].Delay != e.delay {
				cc.Groups = append(cc.Groups, cert.DelayGroup{Delay: e.delay, First: abs(c.first[e.delay] - 1)})
			}
			g := &cc.Groups[len(cc.Groups)-1]
			g.Heights = append(g.Heights, cert.HeightCount{Height: e.h, Count: e.n})
		}
		for _, p := range c.delayRecs {
			cc.DelayRecords = append(cc.DelayRecords, cert.DelayRecord{N: abs(p.off), Delay: p.delay})
		}
		for _, p := range c.pathRecs {
			cc.PathRecords = append(cc.PathRecords, cert.PathRecord{N: abs(p.off), Peak: p.peak})
		}
		b.Cycles = append(b.Cycles, cc)
	}
	sort.Slice(b.Cycles, func(i, j int) bool { return b.Cycles[i].Min.Cmp(b.Cycles[j].Min) < 0 })
	b.Undecided = a.nUndec
	for _, off := range a.undec {
		b.UndecidedNs = append(b.UndecidedNs, abs(off))
	}
	return b
}

// censusTotals adds up block summaries, in block order, into the header's
// (SPEC.md, section 12): counts summed, the first number of each delay the
// first block's, and the records of the blocks that exceed every earlier
// one.
type censusTotals struct {
	cycles    map[string]*totalCycle
	undecided uint64
}

type totalCycle struct {
	min       *big.Int
	counts    map[[2]uint64]uint64 // (delay, height) -> count
	first     map[uint64]*big.Int
	delayRecs []cert.DelayRecord
	pathRecs  []cert.PathRecord
}

func newCensusTotals() *censusTotals { return &censusTotals{cycles: map[string]*totalCycle{}} }

func (t *censusTotals) add(b *cert.CensusBlock) {
	t.undecided += b.Undecided
	for _, c := range b.Cycles {
		key := c.Min.String()
		tc := t.cycles[key]
		if tc == nil {
			tc = &totalCycle{min: c.Min, counts: map[[2]uint64]uint64{}, first: map[uint64]*big.Int{}}
			t.cycles[key] = tc
		}
		for _, g := range c.Groups {
			if tc.first[g.Delay] == nil {
				tc.first[g.Delay] = g.First
			}
			for _, h := range g.Heights {
				tc.counts[[2]uint64{g.Delay, h.Height}] += h.Count
			}
		}
		for _, r := range c.DelayRecords {
			if n := len(tc.delayRecs); n == 0 || r.Delay > tc.delayRecs[n-1].Delay {
				tc.delayRecs = append(tc.delayRecs, r)
			}
		}
		for _, r := range c.PathRecords {
			if n := len(tc.pathRecs); n == 0 || r.Peak.Cmp(tc.pathRecs[n-1].Peak) > 0 {
				tc.pathRecs = append(tc.pathRecs, r)
			}
		}
	}
}

func (t *censusTotals) summary() cert.CensusSummary {
	s := cert.CensusSummary{Undecided: t.undecided}
	for _, tc := range t.cycles {
		cc := cert.CycleCensus{Min: tc.min, DelayRecords: tc.delayRecs, PathRecords: tc.pathRecs}
		keys := make([][2]uint64, 0, len(tc.counts))
		for k := range tc.counts {
			keys = append(keys, k)
		}
		sort.Slice(keys, func(i, j int) bool {
			return keys[i][0] < keys[j][0] || keys[i][0] == keys[j][0] && keys[i][1] < keys[j][1]
		})
		for _, k := range keys {
			if n := len(cc.Groups); n == 0 || cc.Groups[n-1].Delay != k[0] {
				cc.Groups = append(cc.Groups, cert.DelayGroup{Delay: k[0], First: tc.first[k[0]]})
			}
			g := &cc.Groups[len(cc.Groups)-1]
			g.Heights = append(g.Heights, cert.HeightCount{Height: k[1], Count: tc.counts[k]})
		}
		s.Cycles = append(s.Cycles, cc)
	}
	sort.Slice(s.Cycles, func(i, j int) bool { return s.Cycles[i].Min.Cmp(s.Cycles[j].Min) < 0 })
	return s
}
