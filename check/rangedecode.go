package check

import (
	"math/big"
)

// Range certificates (cert/SPEC.md, section 6): the header and the block
// records, read by this package's own decoder.

const (
	maxList     = 1 << 16 // records, cycles or undecided numbers in one list
	maxBlockExp = 62
)

type point struct {
	n     *big.Int
	sigma uint32
}

type cycleCount struct {
	min, count *big.Int
}

// summary is what a block, or the whole range, establishes.
// The counts of a summary, in the order of the format.
const (
	cSieve = iota
	cJoin
	cSearch
	cSmall
	cCycle
	cUndecided
	nCounts
)

type summary struct {
	counts   [nCounts]*big.Int // sieve, join, search, small, cycle, undecided
	sum      *big.Int          // of stopping times
	maxSigma uint32
	maxAt    *big.Int // nil if no number drops
	records  []point
	cycles   []cycleCount
	rules    []*big.Int // numbers justified by each predecessor rule
}

var countNames = [nCounts]string{"numbers justified by the sieve", "numbers justified by a join", "numbers found to drop by search",
	"small numbers found to drop by direct iteration", "numbers that reach a cycle", "undecided numbers"}

type rangeHeader struct {
	a         uint32
	b         int32
	sieveRoot [hashLen]byte
	k, e      int
	cap       uint32
	ceiling   int // W: the search of a number stops, undecided, at an iterate of 2^W or more
	lo, hi    *big.Int
	rules     []rule
	first     *big.Int // index of the first block: lo >> e
	tot       summary
}

// blocks is the number of blocks of the range.
func (h *rangeHeader) blocks() int {
	last := new(big.Int).Sub(h.hi, big.NewInt(1))
	last.Rsh(last, uint(h.e)).Sub(last, h.first)
	return int(last.Int64()) + 1
}

type blockRec struct {
	index     uint32
	sum       summary
	undecided []*big.Int
}

func (p *fields) u128(what string) *big.Int {
	if b := p.next(16, what); b != nil {
		return new(big.Int).SetBytes(b)
	}
	return nil
}

func (p *fields) optNatural(what string) *big.Int {
	if p.bad == nil && p.pos < len(p.b) && p.b[p.pos] == 0 {
		p.pos++
		return nil
	}
	return p.natural(what)
}

// list reads a count and checks it against the cap before anything is
// allocated for it.
func (p *fields) list(what string) int {
	n := p.int32be(what)
	if p.bad == nil && n > maxList {
		p.bad = malformed(int64(preambleLen+p.pos-4), "%d %s; the format allows %d", n, what, maxList)
		return 0
	}
	return int(n)
}

// summaryOf reads a summary with rules rule counts (the header's number
// of rules); wide counts are 16 bytes (the header's), else 8.
func (p *fields) summaryOf(wide bool, rules int) summary {
	var s summary
	count := func(what string) *big.Int {
		if wide {
			return p.u128(what)
		}
		return new(big.Int).SetUint64(p.int64be(what))
	}
	for i := range s.counts {
		s.counts[i] = count(countNames[i])
	}
	s.rules = []*big.Int{}
	for range rules {
		s.rules = append(s.rules, count("rule count"))
	}
	s.sum = p.u128("stopping-time sum")
	s.maxSigma = p.int32be("largest stopping time")
	s.maxAt = p.optNatural("first number with it")
	for range p.list("records") {
		s.records = append(s.records, point{n: p.natural("record"), sigma: p.int32be("record stopping time")})
	}
	for range p.list("cycles") {
		c := cycleCount{min: p.natural("cycle minimum")}
		c.count = count("cycle count")
		s.cycles = append(s.cycles, c)
	}
	return s
}

// sane applies the format's rules on the values of a summary.
func (s *summary) sane(at int64, where string) *Failure {
	if p := s.maxAt; (p == nil) != (s.maxSigma == 0) {
		return malformed(at, "%s: a largest stopping time of %d with first number %v", where, s.maxSigma, p)
	}
	for i, r := range s.records {
		if r.sigma == 0 || (i > 0 && (s.records[i-1].n.Cmp(r.n) >= 0 || s.records[i-1].sigma >= r.sigma)) {
			return malformed(at, "%s: records must increase in n and in stopping time", where)
		}
	}
	for i, c := range s.cycles {
		if c.count.Sign() == 0 || (i > 0 && s.cycles[i-1].min.Cmp(c.min) >= 0) {
			return malformed(at, "%s: cycles must increase in their smallest member and count at least one number", where)
		}
	}
	return nil
}

func parseRangeHeader(body []byte, records int) (*rangeHeader, *Failure) {
	p := &fields{b: body}
	h := &rangeHeader{}
	h.a = p.int32be("multiplier")
	h.b = int32(p.int32be("constant"))
	copy(h.sieveRoot[:], p.next(hashLen, "sieve root"))
	h.k = int(p.byte1("sieve k"))
	h.e = int(p.byte1("block exponent"))
	h.cap = p.int32be("step cap")
	h.ceiling = int(p.int16be("ceiling"))
	h.lo = p.natural("from")
	h.hi = p.natural("to")
	nr := int(p.byte1("rules"))
	if p.bad == nil && nr > maxRules {
		return nil, malformed(int64(preambleLen+p.pos-1), "%d predecessor rules; the format allows %d", nr, maxRules)
	}
	h.rules = []rule{}
	for range nr {
		r := rule{m: p.int64be("rule modulus"), c: p.int64be("rule class"), mp: p.int64be("predecessor modulus"), cp: p.int64be("predecessor class")}
		r.steps = int(p.byte1("rule steps"))
		if p.bad == nil && (r.steps < 1 || r.steps > maxRuleSteps || r.m < 1 || r.m > maxRuleModulus || r.c > maxRuleModulus || r.mp > maxRuleModulus || r.cp > maxRuleModulus) {
			return nil, malformed(int64(preambleLen+p.pos-33), "predecessor rule %v: the format needs 1 to %d steps and M, c, M', c' at most 2^62, M > 0", r, maxRuleSteps)
		}
		h.rules = append(h.rules, r)
	}
	h.tot = p.summaryOf(true, len(h.rules))
	if p.bad != nil {
		return nil, p.bad
	}
	if p.pos != len(body) {
		return nil, malformed(int64(preambleLen+p.pos), "%d bytes follow the last cycle inside the header", len(body)-p.pos)
	}
	const at = preambleLen
	switch {
	case h.a < 3 || h.a%2 == 0:
		return nil, malformed(at, "multiplier %d: the format needs an odd a >= 3", h.a)
	case h.b%2 == 0 || int64(h.b) <= -int64(h.a):
		return nil, malformed(at+4, "constant %d: the format needs an odd b > -a", h.b)
	case h.k < 1 || h.k > maxK || h.e < h.k || h.e > maxBlockExp:
		return nil, malformed(at+40, "sieve k = %d and block exponent %d: the format needs 1 <= k <= e <= %d", h.k, h.e, maxBlockExp)
	case h.cap <= uint32(h.k) || h.cap > maxCap:
		return nil, malformed(at+42, "step cap %d: the format allows k+1 = %d to %d", h.cap, h.k+1, maxCap)
	case h.lo.Cmp(h.hi) >= 0:
		return nil, malformed(at+48, "the range [%v, %v) is empty", h.lo, h.hi)
	}
	if w := minRangeCeiling(h.a, h.b, h.k, h.hi); h.ceiling < max(w, minCeiling) || h.ceiling > maxCeiling {
		return nil, malformed(at+46, "ceiling %d bits: the format needs %d to %d here (at least bitlen(hi + |b|) + k*bitlen(a) = %d and %d)",
			h.ceiling, max(w, minCeiling), maxCeiling, w, minCeiling)
	}
	h.first = new(big.Int).Rsh(h.lo, uint(h.e))
	last := new(big.Int).Sub(h.hi, big.NewInt(1))
	last.Rsh(last, uint(h.e)).Sub(last, h.first)
	if !last.IsInt64() || last.Int64()+1 != int64(records) {
		return nil, malformed(10, "the preamble declares %d records; [%v, %v) has %v blocks of 2^%d", records, h.lo, h.hi, last.Add(last, big.NewInt(1)), h.e)
	}
	return h, h.tot.sane(at, "header")
}

// minRangeCeiling is the least ceiling a range over numbers below hi may
// state: bitlen(hi + |b|) + k*bitlen(a). Every iterate x_i, i <= k, of a
// number n < hi is below (hi + |b|)*a^i, so below 2^W: the k steps a
// search jumps over never reach the ceiling.
func minRangeCeiling(a uint32, b int32, k int, hi *big.Int) int {
	x := new(big.Int).Add(hi, new(big.Int).Abs(big.NewInt(int64(b))))
	return x.BitLen() + k*big.NewInt(int64(a)).BitLen()
}

// parseBlock reads a block record with rules rule counts.
func parseBlock(rec []byte, base int64, rules int) (*blockRec, *Failure) {
	p := &fields{b: rec}
	b := &blockRec{index: p.int32be("block index")}
	b.sum = p.summaryOf(false, rules)
	for range p.list("undecided numbers") {
		b.undecided = append(b.undecided, p.natural("undecided number"))
	}
	if p.bad != nil {
		// fields counts offsets from the header body; rebase them on the record.
		off := *p.bad.Where.Offset - preambleLen + base
		p.bad.Where.Offset = &off
		return nil, p.bad
	}
	if p.pos != len(rec) {
		return nil, malformed(base+int64(p.pos), "%d bytes follow the last undecided number of the block", len(rec)-p.pos)
	}
	if fl := b.sum.sane(base, "block"); fl != nil {
		return nil, fl
	}
	if int64(len(b.undecided)) != b.sum.counts[cUndecided].Int64() || !b.sum.counts[cUndecided].IsInt64() {
		return nil, malformed(base, "the block counts %v undecided numbers and lists %d", b.sum.counts[cUndecided], len(b.undecided))
	}
	for i := 1; i < len(b.undecided); i++ {
		if b.undecided[i-1].Cmp(b.undecided[i]) >= 0 {
			return nil, malformed(base, "undecided numbers must increase")
		}
	}
	return b, nil
}
