package kernel

import (
	"math/big"
	"math/bits"
	"slices"
	"sync"
)

// A range certificate's blocks re-derived number by number, and what they
// add up to (SPEC.md, sections 3 "A range" and 6).

// Sieve is a sieve certificate the kernel checked in full: the value a
// range rests on. Only the kernel makes one (RangeSieve).
type Sieve struct {
	Root   Hash
	Header *SieveHeader
	chunks [][]uint64 // the joined survivors' residues, chunk by chunk
	once   sync.Once
	joined []uint64 // all of them, increasing: made on the first Joined
}

// Joined says whether the survivor class r mod 2^k is joined to a
// smaller one (SPEC.md, section 8).
func (s *Sieve) Joined(r uint64) bool {
	s.once.Do(func() {
		for _, c := range s.chunks {
			s.joined = append(s.joined, c...)
		}
		slices.Sort(s.joined)
	})
	_, ok := slices.BinarySearch(s.joined, r)
	return ok
}

// Range is what deriving the blocks of one range certificate needs: its
// header, its sieve, the arithmetic of its map with j = k, and N0.
type Range struct {
	H     *RangeHeader
	Sieve *Sieve
	P     *Params
	N0    *big.Int
}

// Derive re-derives block i in the plainest way: every number in
// increasing order, by the first justification that applies (section 6),
// the fate rule of section 1 from the number itself. Every step of a fate
// is charged to m; it stops once m runs out or the block has more
// undecided numbers than a record may list.
func (r *Range) Derive(i int, m *Meter) *Block {
	h, p := r.H, r.P
	n, hi := h.Bounds(i)
	low := new(big.Int).And(n, new(big.Int).SetUint64(1<<64-1)).Uint64() // n mod 2^64: its first 64 parities
	var counts [6]uint64
	rules := make([]uint64, len(h.Rules))
	var sumHi, sumLo uint64
	b := &Block{Index: uint32(i)}
	cycles := map[string]*CycleCount{}
	drop := func(n *big.Int, sigma uint32, c int) {
		counts[c]++
		var carry uint64
		sumLo, carry = bits.Add64(sumLo, uint64(sigma), 0)
		sumHi += carry
		if sigma > b.Summary.MaxSigma { // n increases: a new maximum is a record
			b.Summary.MaxSigma, b.Summary.MaxAt = sigma, new(big.Int).Set(n)
			b.Summary.Records = append(b.Summary.Records, Point{b.Summary.MaxAt, sigma})
		}
	}
	fate := func(n *big.Int, c int) {
		switch e := p.Fate(n, h.Cap, h.Ceiling, m); e.Kind {
		case Descends:
			drop(n, e.Steps, c)
		case Cycle:
			counts[CCycle]++
			key := e.CycleMin.String()
			if cycles[key] == nil {
				cycles[key] = &CycleCount{e.CycleMin, new(big.Int)}
			}
			cycles[key].Count.Add(cycles[key].Count, big.NewInt(1))
		default:
			counts[CUndecided]++
			b.Undecided = append(b.Undecided, new(big.Int).Set(n))
		}
	}
	for ; n.Cmp(hi) < 0 && !m.Exceeded() && len(b.Undecided) <= MaxList; n.Add(n, big.NewInt(1)) {
		if n.Cmp(r.N0) <= 0 {
			fate(n, CSmall)
			low++
			continue
		}
		// The class of n: the first t steps with s odd ones such that
		// a^s < 2^t; then T^t(n) < n and t is the stopping time of n > N0.
		v, s, closed := low, 0, 0
		for t := 1; t <= h.K && closed == 0; t++ {
			if v, s = p.Step(v, s); p.Closes(t, s) {
				closed = t
			}
		}
		switch rule := h.RuleFor(n); {
		case closed > 0:
			drop(n, uint32(closed), CSieve)
		case r.Sieve.Joined(low & (1<<h.K - 1)):
			counts[CJoin]++
		case rule >= 0:
			rules[rule]++
		default:
			fate(n, CSearch)
		}
		low++
	}
	s := &b.Summary
	for c, x := range counts {
		s.Counts[c] = new(big.Int).SetUint64(x)
	}
	for _, x := range rules {
		s.Rules = append(s.Rules, new(big.Int).SetUint64(x))
	}
	s.Sum = new(big.Int).Lsh(new(big.Int).SetUint64(sumHi), 64)
	s.Sum.Add(s.Sum, new(big.Int).SetUint64(sumLo))
	for _, c := range cycles {
		s.Cycles = append(s.Cycles, *c)
	}
	slices.SortFunc(s.Cycles, func(x, y CycleCount) int { return x.Min.Cmp(y.Min) })
	return b
}

// total adds up the summaries of the blocks: counts, sums and cycle
// counts added, the records those of the blocks in order that exceed
// every earlier one, the largest stopping time the first block's that
// has it (section 6).
func total(h *RangeHeader, blocks []*Block) *Summary {
	t := &Summary{Sum: new(big.Int), Rules: []*big.Int{}}
	for c := range t.Counts {
		t.Counts[c] = new(big.Int)
	}
	for range h.Rules {
		t.Rules = append(t.Rules, new(big.Int))
	}
	cycles := map[string]*CycleCount{}
	for _, b := range blocks {
		s := &b.Summary
		for c, x := range append(s.Counts[:], s.Rules...) {
			if c < len(t.Counts) {
				t.Counts[c].Add(t.Counts[c], x)
			} else {
				t.Rules[c-len(t.Counts)].Add(t.Rules[c-len(t.Counts)], x)
			}
		}
		t.Sum.Add(t.Sum, s.Sum)
		if s.MaxSigma > t.MaxSigma {
			t.MaxSigma, t.MaxAt = s.MaxSigma, s.MaxAt
		}
		for _, p := range s.Records {
			if len(t.Records) == 0 || p.Sigma > t.Records[len(t.Records)-1].Sigma {
				t.Records = append(t.Records, p)
			}
		}
		for _, c := range s.Cycles {
			if m := cycles[c.Min.String()]; m != nil {
				m.Count.Add(m.Count, c.Count)
			} else {
				cycles[c.Min.String()] = &CycleCount{c.Min, new(big.Int).Set(c.Count)}
			}
		}
	}
	for _, c := range cycles {
		t.Cycles = append(t.Cycles, *c)
	}
	slices.SortFunc(t.Cycles, func(x, y CycleCount) int { return x.Min.Cmp(y.Min) })
	return t
}
