package check

import (
	"math/big"
	"math/bits"
	"runtime"
	"sort"
	"sync"
	"sync/atomic"

	"descent/check/kernel"
)

// The checker's own derivation of a block of a range certificate
// (SPEC.md, section 6): which numbers the sieve justifies, and the search of
// every other number, by arithmetic written here, not taken from the
// emitter.

// wide is an exact non-negative integer: in hi:lo while big is nil.
type wide struct {
	hi, lo uint64
	big    *big.Int
}

func (x wide) toBig() *big.Int {
	if x.big != nil {
		return x.big
	}
	z := new(big.Int).SetUint64(x.hi)
	return z.Lsh(z, 64).Add(z, new(big.Int).SetUint64(x.lo))
}

func fromBig(z *big.Int) wide {
	if z.BitLen() > 128 {
		return wide{big: z}
	}
	words := make([]byte, 16)
	z.FillBytes(words)
	var x wide
	for i := 0; i < 8; i++ {
		x.hi = x.hi<<8 | uint64(words[i])
		x.lo = x.lo<<8 | uint64(words[8+i])
	}
	return x
}

func (x wide) parity() uint64 {
	if x.big != nil {
		return uint64(x.big.Bit(0))
	}
	return x.lo & 1
}

// searcher holds the arithmetic of one range certificate's search.
type searcher struct {
	r     *kernel.Range
	h     *kernel.RangeHeader
	m     *kernel.Meter
	k, d  int
	a, b  *big.Int
	pow   []*big.Int // a^s exactly
	pow64 []uint64   // a^s for the s with a^s < 2^64
	stubs []kernel.Stub
	limHi uint64 // below it (high word of x) a step stays within 128 bits
	half  uint64 // (a-1)/2
	inc   int64  // (b+1)/2
	joins bool   // the sieve has joins
	jump  []jumpEntry
	rules *ruleTable // nil: ruleFor for every number
	limJ  uint64     // below it (high word of x) a jump and its steps stay within 128 bits
}

// newSearcher sets up the search of the blocks of r.
func newSearcher(r *kernel.Range) *searcher {
	h := r.H
	s := &searcher{r: r, h: h, k: h.K, d: r.P.D, half: uint64(h.A-1) / 2, inc: (int64(h.B) + 1) / 2,
		limHi: ^uint64(0)/uint64(h.A) - 1, a: big.NewInt(int64(h.A)), b: big.NewInt(int64(h.B)), joins: r.Sieve.Header.Joins}
	p := big.NewInt(1)
	for i := 0; i <= h.K; i++ {
		s.pow = append(s.pow, new(big.Int).Set(p))
		if p.IsUint64() && len(s.pow64) == i {
			s.pow64 = append(s.pow64, p.Uint64())
		}
		p.Mul(p, s.a)
	}
	// The classes open at depth d, in trie order; the sieve, checked by
	// now, has a record for each.
	s.stubs = r.P.Stubs(1 << 24)
	s.jump, s.limJ = jumpTable(r.P)
	s.rules = newRuleTable(h.Rules, h.K)
	return s
}

// next is T(x), exactly.
func (s *searcher) next(x wide) wide {
	if x.big == nil {
		if x.lo&1 == 0 {
			return wide{hi: x.hi >> 1, lo: x.lo>>1 | x.hi<<63}
		}
		if x.hi < s.limHi {
			return s.oddStep(x)
		}
	}
	z := new(big.Int).Set(x.toBig())
	if z.Bit(0) == 1 {
		z.Mul(z, s.a).Add(z, s.b)
	}
	return fromBig(z.Rsh(z, 1))
}

// oddStep is (a*x + b)/2 for odd x below the limit: (x >> 1) + x*(a-1)/2 +
// (b+1)/2.
func (s *searcher) oddStep(x wide) wide {
	mh, ml := bits.Mul64(x.lo, s.half)
	mh += x.hi * s.half
	var c, borrow uint64
	if s.inc >= 0 {
		ml, c = bits.Add64(ml, uint64(s.inc), 0)
		mh += c
	} else {
		ml, borrow = bits.Sub64(ml, uint64(-s.inc), 0)
		mh -= borrow
	}
	lo, c := bits.Add64(x.lo>>1|x.hi<<63, ml, 0)
	return wide{hi: x.hi>>1 + mh + c, lo: lo}
}

// plus is x + a^odd, in 128 bits while both fit (the walk of the trie
// calls it at every node), by math/big otherwise.
func (s *searcher) plus(x wide, odd int) wide {
	if x.big == nil && odd < len(s.pow64) {
		lo, c := bits.Add64(x.lo, s.pow64[odd], 0)
		if hi, c2 := bits.Add64(x.hi, 0, c); c2 == 0 {
			return wide{hi: hi, lo: lo}
		}
	}
	return fromBig(new(big.Int).Add(x.toBig(), s.pow[odd]))
}

// outcome is what iterating one number found.
type outcome struct {
	fate     byte // 1 drops, 2 cycle, 3 undecided
	sigma    uint32
	cycleMin *big.Int
}

// decide iterates n from x = T^i(n) until it drops below n, within the
// cap; an iterate at the ceiling 2^W stops it, undecided; past the cap the
// fate rule of section 1 decides it. Values below 2^128 never reach the
// ceiling (W >= 128). Every step is charged to the block's meter.
func (s *searcher) decide(n *big.Int, x wide, i uint32) outcome {
	nw := fromBig(n)
	for ; i <= s.h.Cap; i++ {
		if nw.big == nil && x.big == nil {
			if x.hi < nw.hi || (x.hi == nw.hi && x.lo < nw.lo) {
				return outcome{fate: 1, sigma: i}
			}
		} else if x.toBig().Cmp(n) < 0 {
			return outcome{fate: 1, sigma: i}
		}
		if x.big != nil && x.big.BitLen() > s.h.Ceiling {
			return outcome{fate: 3}
		}
		if i == s.h.Cap {
			break
		}
		if x = s.next(x); !s.m.Charge(1) {
			return outcome{fate: 3}
		}
	}
	e := s.r.P.Fate(n, s.h.Cap, s.h.Ceiling, s.m)
	return outcome{fate: e.Kind, sigma: e.Steps, cycleMin: e.CycleMin}
}

// drop steps x = T^i(n) on in 128 bits until it is below n, for numbers n
// below 2^64. It gives up (false) at the cap or when a step could leave 128
// bits, and the caller takes the general path from the start.
//
// Where x >= n*2^shift for the table entry of x's low bits, no iterate of
// the next jumpBits steps is below n, and it takes them at once.
//
// A jump refused (x too near n) is tried again only 4 steps later: near
// the drop, where it is refused, the attempt costs more than the step.
func (s *searcher) drop(n, hi, lo uint64, i uint32) (uint32, bool) {
	retry := i
	for ; i <= s.h.Cap; i++ {
		if hi == 0 && lo < n {
			return i, true
		}
		if i >= retry && s.jump != nil && hi < s.limJ && s.h.Cap-i >= jumpBits {
			retry = i + 4
			if e := &s.jump[lo&(1<<jumpBits-1)]; e.ok && atLeast(hi, lo, e.shift, n) {
				qhi, qlo := hi>>jumpBits, lo>>jumpBits|hi<<(64-jumpBits)
				h, l := bits.Mul64(qlo, e.mult)
				l, c := bits.Add64(l, e.v, 0)
				hi, lo = h+qhi*e.mult+c, l
				i += jumpBits - 1
				continue
			}
		}
		if hi >= s.limHi {
			return 0, false
		}
		if s.inc < 0 {
			if lo&1 == 0 {
				hi, lo = hi>>1, lo>>1|hi<<63
			} else {
				x := s.oddStep(wide{hi: hi, lo: lo})
				hi, lo = x.hi, x.lo
			}
			continue
		}
		// x>>1, plus x*(a-1)/2 + (b+1)/2 where x is odd (oddStep), without a
		// branch on the parity, which no predictor can guess.
		mask := -(lo & 1)
		mh, ml := bits.Mul64(lo, s.half)
		ml, c := bits.Add64(ml, uint64(s.inc), 0)
		mh += hi*s.half + c
		lo, c = bits.Add64(lo>>1|hi<<63, ml&mask, 0)
		hi = hi>>1 + mh&mask + c
	}
	return 0, false
}

// tallies accumulates what one part of a block finds; offsets are from the
// block's first number x0.
type tallies struct {
	counts   [6]uint64
	rules    []uint64 // numbers justified by each predecessor rule
	sumHi    uint64   // the sum of the stopping times, in 128 bits: a block
	sumLo    uint64   // holds at most 2^96 numbers, each below 2^32 steps
	maxSigma uint32
	maxAt    uint64
	points   []offPoint // the records among the numbers searched, increasing
	firstAt  []uint64   // by stopping time: the first offset that the sieve justifies with it, or none
	cycles   map[string]*kernel.CycleCount
	undec    []uint64
}

type offPoint struct {
	off   uint64
	sigma uint32
}

// none marks a stopping time with no first offset yet.
const none = ^uint64(0)

func newTallies(rules, k int) *tallies {
	t := &tallies{firstAt: make([]uint64, k+1), cycles: map[string]*kernel.CycleCount{}, rules: make([]uint64, rules)}
	for i := range t.firstAt {
		t.firstAt[i] = none
	}
	return t
}

// add adds n numbers of stopping time sigma to the sum.
func (t *tallies) add(n uint64, sigma uint32) {
	hi, lo := bits.Mul64(n, uint64(sigma))
	var c uint64
	t.sumLo, c = bits.Add64(t.sumLo, lo, 0)
	t.sumHi += hi + c
}

func (t *tallies) drop(off uint64, sigma uint32, rule int) {
	t.counts[rule]++
	t.add(1, sigma)
	if sigma > t.maxSigma || (sigma == t.maxSigma && off < t.maxAt) {
		t.maxSigma, t.maxAt = sigma, off
	}
	t.stair(offPoint{off, sigma})
}

// stair keeps in t.points only the prefix maxima (the records) of the
// points seen: a point stays unless one before it has a stopping time at
// least as large.
func (t *tallies) stair(p offPoint) {
	if len(t.points) > 0 && t.points[0].off <= p.off && t.points[0].sigma >= p.sigma {
		return // the first record already outdoes it: the common case, without a search
	}
	i := sort.Search(len(t.points), func(i int) bool { return t.points[i].off >= p.off })
	if i > 0 && t.points[i-1].sigma >= p.sigma {
		return
	}
	j := i
	for j < len(t.points) && t.points[j].sigma <= p.sigma {
		j++
	}
	t.points = append(t.points[:i], append([]offPoint{p}, t.points[j:]...)...)
}

func (t *tallies) note(off uint64, r outcome, rule int) {
	switch r.fate {
	case 1:
		t.drop(off, r.sigma, rule)
	case 2:
		t.counts[kernel.CCycle]++
		key := r.cycleMin.String()
		if c := t.cycles[key]; c != nil {
			c.Count.Add(c.Count, big.NewInt(1))
		} else {
			t.cycles[key] = &kernel.CycleCount{Min: r.cycleMin, Count: big.NewInt(1)}
		}
	default:
		t.counts[kernel.CUndecided]++
		if len(t.undec) <= kernel.MaxList {
			t.undec = append(t.undec, off)
		}
	}
}

// part is the work on one block restricted to the offsets [from, to).
type part struct {
	s        *searcher
	stop     *atomic.Bool // set once the block has more undecided numbers than a record can list
	x0       *big.Int
	x0u      uint64 // x0, when the whole block lies below 2^64 (fast)
	fast     bool
	from, to uint64
	t        *tallies
	// The steps of the fast search are charged to the block's meter in
	// batches: a meter shared by the workers and charged at every number
	// would keep its cache line moving between the cores.
	owed    int64
	stopped bool
	// The joined survivors below the part's stub, in the order in which
	// the walk meets them, and the next one to meet: a lookup in the list
	// of all of them (kernel.Sieve.Joined) would cost a binary search over
	// tens of millions of residues at every survivor.
	joined []uint64
	jnext  int
}

// settle charges the steps owed to the meter and says whether to go on:
// not once the meter is spent, another part stopped, or the block has
// more undecided numbers than a record lists.
func (p *part) settle() {
	p.s.m.Charge(p.owed)
	p.owed = 0
	if p.t.counts[kernel.CUndecided] > kernel.MaxList || p.s.m.Exceeded() {
		p.stop.Store(true)
	}
	p.stopped = p.stop.Load()
}

// inClass returns how many offsets of [from, to) are congruent to res mod
// 2^t, and the first.
func (p *part) inClass(res uint64, t int) (uint64, uint64) {
	m := uint64(1) << t
	first := res
	if p.from > res {
		first = res + (p.from-res+m-1)/m*m
	}
	if first >= p.to {
		return 0, 0
	}
	return (p.to-first-1)/m + 1, first
}

// classes walks the classes below res mod 2^t (s odd steps, value v =
// T^t(res)) down to depth end: a closing class justifies its members, each
// with stopping time t; a survivor class has each member searched.
func (p *part) classes(t, odd int, v wide, res uint64, end int) {
	s := p.s
	if t == end {
		if end == s.k {
			p.survivor(res, odd, v)
		}
		return
	}
	for c := uint64(0); c < 2; c++ {
		vc := v
		if c == 1 {
			vc = s.plus(v, odd)
		}
		if vc.parity() == 0 && s.r.P.Closes(t+1, odd) {
			cls := res | c<<t
			if n, first := p.inClass(cls, t+1); n > 0 {
				p.t.counts[kernel.CSieve] += n
				p.t.add(n, uint32(t+1))
				p.t.firstAt[t+1] = min(p.t.firstAt[t+1], first)
			}
			continue
		}
		next := odd + int(vc.parity())
		p.classes(t+1, next, s.next(vc), res|c<<t, end)
	}
}

// survivor searches every member n = 2^k*q + res, starting k steps on:
// T^k(n) = a^s*q + T^k(res).
func (p *part) survivor(res uint64, odd int, tk wide) {
	s := p.s
	if p.owed >= 1<<16 {
		p.settle()
	}
	if p.stopped {
		return
	}
	n, off := p.inClass(res, s.k)
	if p.joined != nil && p.jnext < len(p.joined) && p.joined[p.jnext] == res {
		p.jnext++
		// Every member above N0 meets a smaller number after k steps.
		p.t.counts[kernel.CJoin] += n
		return
	}
	if n == 0 {
		return
	}
	if p.fast && tk.big == nil && odd < len(s.pow64) {
		m := s.pow64[odd]
		var at uint64 // n mod L, for the rule table
		if s.rules != nil {
			at = (p.x0u + off) % uint64(len(s.rules.first))
		}
		for ; n > 0; n, off = n-1, off+1<<s.k {
			num := p.x0u + off
			r := -1
			if s.rules == nil || num < s.rules.maxC {
				r = s.ruleFor(num)
			} else {
				r = int(s.rules.first[at])
			}
			if s.rules != nil {
				if at += s.rules.step; at >= uint64(len(s.rules.first)) {
					at -= uint64(len(s.rules.first))
				}
			}
			if r >= 0 {
				p.t.rules[r]++
				continue
			}
			// x = m*(num >> k) + tk, in 128 bits; a carry out means the
			// general path.
			h, l := bits.Mul64(m, num>>s.k)
			l, c := bits.Add64(l, tk.lo, 0)
			h, c2 := bits.Add64(h, tk.hi, c)
			if c2 == 0 {
				if sigma, ok := s.drop(num, h, l, uint32(s.k)); ok {
					p.owed += int64(sigma) - int64(s.k)
					p.t.note(off, outcome{fate: 1, sigma: sigma}, kernel.CSearch)
					continue
				}
			}
			nb := new(big.Int).SetUint64(num)
			x := new(big.Int).Rsh(nb, uint(s.k))
			x.Mul(x, s.pow[odd]).Add(x, tk.toBig())
			p.t.note(off, s.decide(nb, fromBig(x), uint32(s.k)), kernel.CSearch)
			if p.settle(); p.stopped {
				return
			}
		}
		return
	}
	for ; n > 0; n, off = n-1, off+1<<s.k {
		num := new(big.Int).Add(p.x0, new(big.Int).SetUint64(off))
		if r := s.h.RuleFor(num); r >= 0 {
			p.t.rules[r]++
			continue
		}
		x := new(big.Int).Rsh(num, uint(s.k))
		x.Mul(x, s.pow[odd]).Add(x, tk.toBig())
		p.t.note(off, s.decide(num, fromBig(x), uint32(s.k)), kernel.CSearch)
		if p.settle(); p.stopped {
			return
		}
	}
}

// derive computes the summary of block i from scratch, the work spread
// over the stubs.
func (s *searcher) derive(i int, workers int) *kernel.Block {
	h := s.h
	lo, hi := h.Bounds(i)
	x0 := new(big.Int).Lsh(new(big.Int).Rsh(lo, uint(h.E)), uint(h.E))
	from := new(big.Int).Sub(lo, x0).Uint64()
	to := new(big.Int).Sub(hi, x0).Uint64()
	split := from // offsets below split are at most the small bound
	if above := new(big.Int).Sub(s.r.N0, x0); above.Sign() >= 0 {
		split = max(from, min(to, above.Uint64()+1))
	}

	stop := new(atomic.Bool)
	parts := []*part{{s: s, x0: x0, from: from, to: split, t: newTallies(len(h.Rules), h.K), stop: stop}}
	small := parts[0]
	for off := small.from; off < small.to && small.t.counts[kernel.CUndecided] <= kernel.MaxList && !s.m.Exceeded(); off++ {
		n := new(big.Int).Add(x0, new(big.Int).SetUint64(off))
		small.t.note(off, s.decide(n, fromBig(n), 0), kernel.CSmall)
	}
	top := &part{s: s, x0: x0, from: split, to: to, t: newTallies(len(h.Rules), h.K), stop: stop}
	parts = append(parts, top)
	top.classes(0, 0, wide{}, 0, s.d)
	var wg sync.WaitGroup
	sem := make(chan struct{}, max(workers, 1))
	end := new(big.Int).Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(h.E)))
	fast := end.BitLen() <= 64
	for i, st := range s.stubs {
		res := st.Res
		p := &part{s: s, x0: x0, from: split, to: to, t: newTallies(len(h.Rules), h.K), fast: fast, stop: stop}
		if s.joins {
			p.joined = s.r.Sieve.JoinedBelow(i)
		}
		if fast {
			p.x0u = x0.Uint64()
		}
		parts = append(parts, p)
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			v, odd := wide{lo: res}, 0
			for range s.d {
				odd += int(v.parity())
				v = s.next(v)
			}
			p.classes(s.d, odd, v, res, s.k)
			p.settle()
		}()
	}
	wg.Wait()
	return collect(uint32(i), x0, parts)
}

// collect adds up the parts of a block into its record.
func collect(index uint32, x0 *big.Int, parts []*part) *kernel.Block {
	b := &kernel.Block{Index: index}
	sum := &b.Summary
	var counts [6]uint64
	var rules []uint64
	total := new(big.Int)
	var pts []offPoint
	var maxSigma uint32
	var maxAt uint64
	cycles := map[string]*kernel.CycleCount{}
	var undec []uint64
	var firstAt []uint64
	for _, p := range parts {
		t := p.t
		for i, c := range t.counts {
			counts[i] += c
		}
		if rules == nil {
			rules = make([]uint64, len(t.rules))
		}
		for i, c := range t.rules {
			rules[i] += c
		}
		sum := new(big.Int).SetUint64(t.sumHi)
		total.Add(total, sum.Lsh(sum, 64).Add(sum, new(big.Int).SetUint64(t.sumLo)))
		pts = append(pts, t.points...)
		if firstAt == nil {
			firstAt = t.firstAt
		}
		for step, off := range t.firstAt {
			firstAt[step] = min(firstAt[step], off)
		}
		if t.maxSigma > maxSigma || (t.maxSigma == maxSigma && t.maxSigma > 0 && t.maxAt < maxAt) {
			maxSigma, maxAt = t.maxSigma, t.maxAt
		}
		for key, c := range t.cycles {
			if m := cycles[key]; m != nil {
				m.Count.Add(m.Count, c.Count)
			} else {
				cycles[key] = &kernel.CycleCount{Min: c.Min, Count: new(big.Int).Set(c.Count)}
			}
		}
		undec = append(undec, t.undec...)
	}
	for step, off := range firstAt {
		if off == none {
			continue
		}
		sigma := uint32(step)
		pts = append(pts, offPoint{off, sigma})
		if sigma > maxSigma || (sigma == maxSigma && off < maxAt) {
			maxSigma, maxAt = sigma, off
		}
	}
	abs := func(off uint64) *big.Int { return new(big.Int).Add(x0, new(big.Int).SetUint64(off)) }
	for i, c := range counts {
		sum.Counts[i] = new(big.Int).SetUint64(c)
	}
	sum.Rules = []*big.Int{}
	for _, c := range rules {
		sum.Rules = append(sum.Rules, new(big.Int).SetUint64(c))
	}
	sum.Sum = total
	if maxSigma > 0 {
		sum.MaxSigma, sum.MaxAt = maxSigma, abs(maxAt)
	}
	// Records: the numbers whose stopping time exceeds that of every
	// smaller number of the block that drops.
	sort.Slice(pts, func(i, j int) bool {
		return pts[i].off < pts[j].off || (pts[i].off == pts[j].off && pts[i].sigma > pts[j].sigma)
	})
	var best uint32
	for _, p := range pts {
		if p.sigma > best {
			sum.Records = append(sum.Records, kernel.Point{N: abs(p.off), Sigma: p.sigma})
			best = p.sigma
		}
	}
	for _, c := range cycles {
		sum.Cycles = append(sum.Cycles, *c)
	}
	sortCycles(sum.Cycles)
	sort.Slice(undec, func(i, j int) bool { return undec[i] < undec[j] })
	for _, off := range undec {
		b.Undecided = append(b.Undecided, abs(off))
	}
	return b
}

// ruleFor returns the first rule that covers n < 2^64, or -1.
func (s *searcher) ruleFor(n uint64) int {
	for i, r := range s.h.Rules {
		if n >= r.C && (n-r.C)%r.M == 0 {
			return i
		}
	}
	return -1
}

// ruleTable is the first predecessor rule of each residue mod L, the least
// common multiple of the rules' moduli (3n+1's auto rules: 3, 9, 81), or
// nil if L is above 2^16: a class's members n, n + 2^k, ... then step
// through the table by additions, where ruleFor divides for every rule and
// number. It holds the congruence only; below the largest C, n >= C is
// ruleFor's to judge.
type ruleTable struct {
	first []int8
	step  uint64 // 2^k mod L
	maxC  uint64
}

func newRuleTable(rules []kernel.Rule, k int) *ruleTable {
	l := uint64(1)
	for _, r := range rules {
		g, m := l, r.M
		for m != 0 {
			g, m = m, g%m
		}
		if l = l / g * r.M; l > 1<<16 {
			return nil
		}
	}
	t := &ruleTable{first: make([]int8, l), step: (1 << k) % l}
	for x := range t.first {
		t.first[x] = -1
		for i, r := range rules {
			if uint64(x)%r.M == r.C%r.M {
				t.first[x] = int8(i)
				break
			}
		}
	}
	for _, r := range rules {
		t.maxC = max(t.maxC, r.C)
	}
	return t
}

func sortCycles(cs []kernel.CycleCount) {
	sort.Slice(cs, func(i, j int) bool { return cs[i].Min.Cmp(cs[j].Min) < 0 })
}

func defaultWorkers(w int) int {
	if w <= 0 {
		return runtime.GOMAXPROCS(0)
	}
	return w
}
