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
	chunks [][]uint64 // the joined survivors' residues, chunk by chunk, in the order of the codes
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

// JoinedBelow returns the residues of the joined survivors below stub i
// (in chunk i+1) in the order of the codes, which is the order in which a
// walk of the trie below the stub meets them.
func (s *Sieve) JoinedBelow(i int) []uint64 {
	if i+1 < len(s.chunks) {
		return s.chunks[i+1]
	}
	return nil
}

// Range is what deriving the blocks of one range certificate needs: its
// header, its sieve, the arithmetic of its map with j = k, and N0.
type Range struct {
	H     *RangeHeader
	Sieve *Sieve
	P     *Params
	N0    *big.Int
}

// Derive re-derives block i in the plainest way: each number in turn, by
// the first justification that applies (section 6), else the fate rule
// from the number itself, charging m every step; it stops once m runs out
// or the block has more undecided numbers than a record may list.
func (r *Range) Derive(i int, m *Meter) *Block {
	h, p, one := r.H, r.P, big.NewInt(1)
	n, hi := h.Bounds(i)
	low := new(big.Int).And(n, new(big.Int).SetUint64(1<<64-1)).Uint64() // n mod 2^64: its first 64 parities
	b := &Block{Index: uint32(i), Summary: newSummary(len(h.Rules))}
	s, counts, rules, sumHi, sumLo := &b.Summary, [6]uint64{}, make([]uint64, len(h.Rules)), uint64(0), uint64(0)
	drop := func(c int, t uint32) { // machine words here: this loop is the reference check's time
		var carry uint64
		counts[c]++
		sumLo, carry = bits.Add64(sumLo, uint64(t), 0)
		if sumHi += carry; t > s.MaxSigma { // n increases: a new maximum is a record
			s.MaxSigma, s.MaxAt = t, new(big.Int).Set(n)
			s.Records = append(s.Records, Point{s.MaxAt, t})
		}
	}
	for ; n.Cmp(hi) < 0 && !m.Exceeded() && len(b.Undecided) <= MaxList; n.Add(n, one) {
		x, c := low, CSmall
		if low++; n.Cmp(r.N0) > 0 {
			c = CSearch
			// The class of n: the first t steps with s odd ones such that
			// a^s < 2^t; then T^t(n) < n and t is the stopping time of n > N0.
			closed := 0
			for t, v, odd := 1, x, 0; t <= h.K && closed == 0; t++ {
				if v, odd = p.Step(v, odd); p.Closes(t, odd) {
					closed = t
				}
			}
			if closed > 0 {
				drop(CSieve, uint32(closed))
				continue
			} else if r.Sieve.Joined(x & (1<<h.K - 1)) {
				counts[CJoin]++
				continue
			} else if rule := h.RuleFor(n); rule >= 0 {
				rules[rule]++
				continue
			}
		}
		switch e := p.Fate(n, h.Cap, h.Ceiling, m); e.Kind {
		case Descends:
			drop(c, e.Steps)
		case Cycle:
			counts[CCycle]++
			s.Cycles = addCycle(s.Cycles, e.CycleMin, one)
		default:
			counts[CUndecided]++
			b.Undecided = append(b.Undecided, new(big.Int).Set(n))
		}
	}
	all := append(s.Counts[:], s.Rules...)
	for c, x := range append(counts[:], rules...) {
		all[c].SetUint64(x)
	}
	s.Sum.Lsh(new(big.Int).SetUint64(sumHi), 64).Add(s.Sum, new(big.Int).SetUint64(sumLo))
	return b
}

func newSummary(rules int) Summary {
	s := Summary{Sum: new(big.Int), Rules: []*big.Int{}}
	for c := range s.Counts {
		s.Counts[c] = new(big.Int)
	}
	for range rules {
		s.Rules = append(s.Rules, new(big.Int))
	}
	return s
}

// addCycle adds count numbers that reach the cycle with smallest member
// least to cs, kept in increasing order of least.
func addCycle(cs []CycleCount, least, count *big.Int) []CycleCount {
	i, found := slices.BinarySearchFunc(cs, least, func(c CycleCount, x *big.Int) int { return c.Min.Cmp(x) })
	if found {
		cs[i].Count.Add(cs[i].Count, count)
		return cs
	}
	return slices.Insert(cs, i, CycleCount{least, new(big.Int).Set(count)})
}

// total adds up the summaries of the blocks: counts, sums and cycle
// counts added, the records those of the blocks in order that exceed
// every earlier one, the largest stopping time the first block's that
// has it (section 6).
func total(h *RangeHeader, blocks []*Block) *Summary {
	t := newSummary(len(h.Rules))
	for _, b := range blocks {
		s := &b.Summary
		for c, x := range append(s.Counts[:], s.Rules...) {
			if c < len(t.Counts) {
				t.Counts[c].Add(t.Counts[c], x)
			} else {
				t.Rules[c-len(t.Counts)].Add(t.Rules[c-len(t.Counts)], x)
			}
		}
		if t.Sum.Add(t.Sum, s.Sum); s.MaxSigma > t.MaxSigma {
			t.MaxSigma, t.MaxAt = s.MaxSigma, s.MaxAt
		}
		for _, p := range s.Records {
			if len(t.Records) == 0 || p.Sigma > t.Records[len(t.Records)-1].Sigma {
				t.Records = append(t.Records, p)
			}
		}
		for _, c := range s.Cycles {
			t.Cycles = addCycle(t.Cycles, c.Min, c.Count)
		}
	}
	return &t
}
