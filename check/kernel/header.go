package kernel

import (
	"encoding/binary"
	"fmt"
	"math/big"
)

// The header bodies (SPEC.md, sections 2, 6 and 7) and the block records
// of a range, with the format's rules on their values.

// Caps and bounds of the format (SPEC.md, sections 2 and 4).
const (
	magic, version                               = "descent\x00", 2
	kindSieve, kindJoins, kindRange, kindShard   = 's', 'j', 'r', 'h'
	maxExc, maxCap, maxK, minCeiling, maxCeiling = 1 << 16, 1 << 24, 64, 128, 8192
	MaxList, maxBlockExp, maxRules, maxRuleSteps = 1 << 16, 62, 16, 64 // MaxList: records, cycles or undecided numbers in a list
)

// Map is T(n) = n/2 for even n, (A*n + B)/2 for odd n.
type Map struct {
	A uint32
	B int32
}

func (m Map) String() string { return fmt.Sprintf("%dn%+d", m.A, m.B) }

// The fates of a number (SPEC.md, section 1, "Fates"), and the six counts
// of a summary in the order of the format (section 6).
const (
	Descends, Cycle, Undecided                         = 1, 2, 3
	CSieve, CJoin, CSearch, CSmall, CCycle, CUndecided = 0, 1, 2, 3, 4, 5
)

// Fate is the fate of N: Descends after Steps steps, Cycle with the
// cycle's smallest member CycleMin, or Undecided.
type Fate struct {
	N, CycleMin *big.Int
	Kind        byte
	Steps       uint32
}

// SieveHeader is the header body of a sieve (kinds s and j).
type SieveHeader struct {
	Map
	K, J              int
	Cap               uint32 // C
	Ceiling           int    // W, in bits
	Joins             bool   // kind j
	Survivors, Joined uint64
	ClosedAt          []uint64 // ClosedAt[t-1] for t = 1..J
	Exceptions        []Fate
}

// Summary is what a block, or the whole range, states (section 6).
type Summary struct {
	Counts   [6]*big.Int // CSieve .. CUndecided
	Rules    []*big.Int  // numbers resting on each predecessor rule
	Sum      *big.Int    // of the stopping times
	MaxSigma uint32
	MaxAt    *big.Int // nil if no number drops
	Records  []Point
	Cycles   []CycleCount
}

// Point is a number with its stopping time; CycleCount a cycle by its
// smallest member, with the numbers reaching it.
type Point struct {
	N     *big.Int
	Sigma uint32
}

type CycleCount struct{ Min, Count *big.Int }

// Rule is a predecessor rule: every n = M*q + C has the predecessor
// m = Mp*q + Cp with T^Steps(m) = n (section 9).
type Rule struct {
	M, C, Mp, Cp uint64
	Steps        int
}

// RangeHeader is the header body of a range (kind r).
type RangeHeader struct {
	Map
	SieveRoot Hash
	K, E      int
	Cap       uint32
	Ceiling   int
	Lo, Hi    *big.Int
	Rules     []Rule
	Totals    Summary
	first     *big.Int // the first block's index, Lo >> E
}

// Block is a block record; ShardHeader a shard's header (section 7).
type Block struct {
	Index     uint32
	Summary   Summary
	Undecided []*big.Int
}

type ShardHeader struct {
	Whole                                 byte // the whole's kind
	Index, Of, First, Count, WholeRecords int
	sieve                                 *SieveHeader
	rng                                   *RangeHeader
}

// fields reads a header body or a block record, base its offset in the
// file. Its error is sticky: after the first, reads give zeros (never
// sized by the input) and rules pass, so a parser reads on and returns
// p.bad once at the end.
type fields struct {
	b    []byte
	pos  int
	base int64
	bad  *Failure
}

func (p *fields) next(n int, what string) []byte {
	p.need(len(p.b)-p.pos >= n, p.base+int64(p.pos), "the header ends inside the %s", what)
	if p.bad != nil {
		return make([]byte, min(n, 32))
	}
	p.pos += n
	return p.b[p.pos-n : p.pos]
}

// need applies a rule of the format: if ok is false, the value read at
// offset at (in the file) is malformed.
func (p *fields) need(ok bool, at int64, format string, args ...any) {
	if p.bad == nil && !ok {
		p.bad = malformed(at, format, args...)
	}
}

func (p *fields) at() int64                        { return p.base + int64(p.pos) }
func (p *fields) u8(what string) int               { return int(p.next(1, what)[0]) }
func (p *fields) u16(what string) int              { return int(binary.BigEndian.Uint16(p.next(2, what))) }
func (p *fields) u32(what string) uint32           { return binary.BigEndian.Uint32(p.next(4, what)) }
func (p *fields) u64(what string) uint64           { return binary.BigEndian.Uint64(p.next(8, what)) }
func (p *fields) wide(n int, what string) *big.Int { return new(big.Int).SetBytes(p.next(n, what)) }

// natural reads a length byte and that many bytes, in canonical form.
func (p *fields) natural(what string) *big.Int {
	at, n := p.at(), p.u8(what)
	p.need(n > 0, at, "%s has length 0", what)
	b := p.next(n, what)
	p.need(len(b) == 0 || b[0] != 0, at+1, "%s starts with a zero byte, which is not canonical", what)
	return new(big.Int).SetBytes(b)
}

// list reads a count and checks it against the cap before anything is
// allocated for it.
func (p *fields) list(what string, limit uint32) int {
	n := p.u32(what)
	if p.need(n <= limit, p.at()-4, "%d %s; the format allows %d", n, what, limit); p.bad != nil {
		return 0
	}
	return int(n)
}

// done fails unless the body ends here.
func (p *fields) done(after string) *Failure {
	p.need(p.pos == len(p.b), p.at(), "%d bytes follow the %s", len(p.b)-p.pos, after)
	return p.bad
}

func (p *fields) mapRules(m Map) {
	p.need(m.A >= 3 && m.A%2 == 1, preambleLen, "multiplier %d: the format needs an odd a >= 3", m.A)
	p.need(m.B%2 != 0 && int64(m.B) > -int64(m.A), preambleLen+4, "constant %d: the format needs an odd b > -a", m.B)
}

func parseSieveHeader(body []byte, joins bool, records int) (*SieveHeader, *Failure) {
	const at = preambleLen
	p := &fields{b: body, base: at}
	h := &SieveHeader{Map: Map{p.u32("multiplier"), int32(p.u32("constant"))}, K: p.u8("k"), J: p.u8("j")}
	h.Cap, h.Ceiling, h.Survivors = p.u32("step cap"), p.u16("ceiling"), p.u64("survivor count")
	if h.Joins = joins; joins {
		h.Joined = p.u64("joined count")
	}
	p.need(h.K >= 1 && h.K <= maxK && h.J >= 1 && h.J <= h.K, at+8, "k = %d and j = %d: the format needs 1 <= j <= k <= %d", h.K, h.J, maxK)
	for t := 0; t < h.J && p.bad == nil; t++ {
		h.ClosedAt = append(h.ClosedAt, p.u64("closing counts"))
	}
	for i := range p.list("exceptions", maxExc) {
		e := Fate{N: p.natural("exception"), Kind: byte(p.u8("fate"))}
		if e.Kind == Descends {
			e.Steps = p.u32("steps")
		} else if e.Kind == Cycle {
			e.CycleMin = p.natural("cycle minimum")
		}
		p.need(e.Kind >= Descends && e.Kind <= Undecided, p.at(), "exception %d has fate %d; fates are 1, 2 and 3", i, e.Kind)
		h.Exceptions = append(h.Exceptions, e)
	}
	if fl := p.done("last exception inside the header"); fl != nil {
		return nil, fl
	}
	p.mapRules(h.Map)
	p.need(h.Cap >= 1 && h.Cap <= maxCap, at+10, "step cap %d: the format allows 1 to %d", h.Cap, maxCap)
	p.need(h.Ceiling >= minCeiling && h.Ceiling <= maxCeiling, at+14, "ceiling %d bits: the format allows %d to %d", h.Ceiling, minCeiling, maxCeiling)
	p.need(!joins || h.J == h.K, at+9, "a sieve with joins needs j = k; this one has j = %d, k = %d", h.J, h.K)
	p.need(!joins || h.Joined <= h.Survivors, at+24, "a sieve with joins claims %d joined of its %d survivors", h.Joined, h.Survivors)
	d := splitDepth(h.J)
	p.need(records >= 2 && records-1 <= 1<<d, 10, "%d records: a trie cut at depth %d has 1 to %d classes below the top", records, d, 1<<d)
	for i, e := range h.Exceptions {
		p.need(i == 0 || h.Exceptions[i-1].N.Cmp(e.N) < 0, at, "exception %v is out of increasing order", e.N)
		p.need(e.Kind != Descends || e.Steps >= 1 && e.Steps <= h.Cap, at, "exception %v descends after %d steps; the cap is %d", e.N, e.Steps, h.Cap)
		p.need(e.Kind != Cycle || e.CycleMin.Cmp(e.N) >= 0, at, "exception %v reaches a cycle whose smallest member %v is below it", e.N, e.CycleMin)
	}
	return h, p.bad
}

// summary reads a summary with the given number of rule counts, and
// applies the rules on its values; counts are u128 in a header (wide) and
// u64 in a block.
func (p *fields) summary(wide bool, rules int, where string) Summary {
	s, at, n := Summary{Rules: []*big.Int{}}, p.at(), 8
	if wide {
		n = 16
	}
	for i := range s.Counts {
		s.Counts[i] = p.wide(n, "counts")
	}
	for range rules {
		s.Rules = append(s.Rules, p.wide(n, "rule count"))
	}
	s.Sum, s.MaxSigma = p.wide(16, "stopping-time sum"), p.u32("largest stopping time")
	if p.bad == nil && p.pos < len(p.b) && p.b[p.pos] == 0 {
		p.pos++ // an optional natural: none
	} else {
		s.MaxAt = p.natural("first number with it")
	}
	for range p.list("records", MaxList) {
		s.Records = append(s.Records, Point{p.natural("record"), p.u32("record stopping time")})
	}
	for range p.list("cycles", MaxList) {
		s.Cycles = append(s.Cycles, CycleCount{p.natural("cycle minimum"), p.wide(n, "cycle count")})
	}
	if p.bad != nil {
		return s
	}
	p.need((s.MaxAt == nil) == (s.MaxSigma == 0), at, "%s: a largest stopping time of %d with first number %v", where, s.MaxSigma, s.MaxAt)
	for i, r := range s.Records {
		p.need(r.Sigma > 0 && (i == 0 || s.Records[i-1].N.Cmp(r.N) < 0 && s.Records[i-1].Sigma < r.Sigma), at, "%s: records must increase in n and in stopping time", where)
	}
	for i, c := range s.Cycles {
		p.need(c.Count.Sign() > 0 && (i == 0 || s.Cycles[i-1].Min.Cmp(c.Min) < 0), at, "%s: cycles must increase in their smallest member and count at least one number", where)
	}
	return s
}

func parseRangeHeader(body []byte, records int) (*RangeHeader, *Failure) {
	const at = preambleLen
	p := &fields{b: body, base: at}
	h := &RangeHeader{Map: Map{p.u32("multiplier"), int32(p.u32("constant"))}, SieveRoot: Hash(p.next(32, "sieve root"))}
	h.K, h.E, h.Cap, h.Ceiling = p.u8("sieve k"), p.u8("block exponent"), p.u32("step cap"), p.u16("ceiling")
	h.Lo, h.Hi = p.natural("from"), p.natural("to")
	nr := p.u8("rules")
	p.need(nr <= maxRules, p.at()-1, "%d predecessor rules; the format allows %d", nr, maxRules)
	h.Rules = []Rule{}
	for i := 0; i < nr && p.bad == nil; i++ {
		r := Rule{M: p.u64("rule modulus"), C: p.u64("rule class"), Mp: p.u64("predecessor modulus"), Cp: p.u64("predecessor class"), Steps: p.u8("rule steps")}
		p.need(r.Steps >= 1 && r.Steps <= maxRuleSteps && r.M >= 1 && max(r.M, r.C, r.Mp, r.Cp) <= 1<<62, p.at()-33,
			"predecessor rule %d: the format needs 1 to %d steps and M, c, M', c' at most 2^62, M > 0", i, maxRuleSteps)
		h.Rules = append(h.Rules, r)
	}
	h.Totals = p.summary(true, len(h.Rules), "header")
	if fl := p.done("last cycle inside the header"); fl != nil {
		return nil, fl
	}
	p.mapRules(h.Map)
	p.need(h.K >= 1 && h.K <= maxK && h.E >= h.K && h.E <= maxBlockExp, at+40, "sieve k = %d and block exponent %d: the format needs 1 <= k <= e <= %d", h.K, h.E, maxBlockExp)
	p.need(h.Cap > uint32(h.K) && h.Cap <= maxCap, at+42, "step cap %d: the format allows k+1 = %d to %d", h.Cap, h.K+1, maxCap)
	p.need(h.Lo.Cmp(h.Hi) < 0, at+48, "the range [%v, %v) is empty", h.Lo, h.Hi)
	// Every iterate x_i, i <= k, of a number below hi is below
	// (hi + |b|)*a^i, so below 2^W: the k steps a search jumps never
	// reach the ceiling (SPEC.md, section 6).
	w := new(big.Int).Add(h.Hi, big.NewInt(int64(max(h.B, -h.B)))).BitLen() + h.K*big.NewInt(int64(h.A)).BitLen()
	p.need(h.Ceiling >= max(w, minCeiling) && h.Ceiling <= maxCeiling, at+46, "ceiling %d bits: the format needs %d to %d here (at least bitlen(hi + |b|) + k*bitlen(a) = %d and %d)",
		h.Ceiling, max(w, minCeiling), maxCeiling, w, minCeiling)
	if p.bad != nil {
		return nil, p.bad
	}
	h.first = new(big.Int).Rsh(h.Lo, uint(h.E))
	n := new(big.Int).Sub(h.Hi, big.NewInt(1))
	n.Rsh(n, uint(h.E)).Sub(n, h.first).Add(n, big.NewInt(1))
	p.need(n.IsInt64() && n.Int64() == int64(records), 10, "the preamble declares %d records; [%v, %v) has %v blocks of 2^%d", records, h.Lo, h.Hi, n, h.E)
	return h, p.bad
}

// Bounds returns the numbers [lo, hi) of block i: [(B0+i)*2^e,
// (B0+i+1)*2^e) cut to [Lo, Hi), B0 = Lo >> e.
func (h *RangeHeader) Bounds(i int) (lo, hi *big.Int) {
	lo = new(big.Int).Lsh(new(big.Int).Add(h.first, big.NewInt(int64(i))), uint(h.E))
	hi = new(big.Int).Add(lo, new(big.Int).Lsh(big.NewInt(1), uint(h.E)))
	if lo.Cmp(h.Lo) < 0 {
		lo.Set(h.Lo)
	}
	if hi.Cmp(h.Hi) > 0 {
		hi.Set(h.Hi)
	}
	return lo, hi
}

// parseBlock reads block record g (its global index) at offset base and
// applies the rules of section 6 and step 7 of section 3.
func (h *RangeHeader) parseBlock(rec []byte, g int, base int64) (*Block, *Failure) {
	p := &fields{b: rec, base: base}
	b := &Block{Index: p.u32("block index")}
	b.Summary = p.summary(false, len(h.Rules), "block")
	for range p.list("undecided numbers", MaxList) {
		b.Undecided = append(b.Undecided, p.natural("undecided number"))
	}
	if fl := p.done("last undecided number of the block"); fl != nil {
		return nil, fl
	}
	u, sum := b.Summary.Counts[CUndecided], new(big.Int)
	p.need(u.IsInt64() && int64(len(b.Undecided)) == u.Int64(), base, "the block counts %v undecided numbers and lists %d", u, len(b.Undecided))
	for i := 1; i < len(b.Undecided); i++ {
		p.need(b.Undecided[i-1].Cmp(b.Undecided[i]) < 0, base, "undecided numbers must increase")
	}
	p.need(b.Index == uint32(g), base, "record %d says it is block %d", g, b.Index)
	for _, c := range append(b.Summary.Counts[:], b.Summary.Rules...) {
		sum.Add(sum, c)
	}
	lo, hi := h.Bounds(g)
	p.need(sum.Cmp(hi.Sub(hi, lo)) == 0, base, "block %d counts %v numbers; it has %v", g, sum, hi)
	return b, p.bad
}

func parseShardHeader(body []byte, records int) (*ShardHeader, *Failure) {
	const at = preambleLen
	p := &fields{b: body, base: at}
	h := &ShardHeader{Whole: byte(p.u8("whole kind")), Index: int(p.u32("shard index")), Of: int(p.u32("shard count")),
		First: int(p.u32("first record")), Count: int(p.u32("record count"))}
	w := p.next(int(p.u32("whole header length")), "whole header")
	if fl := p.done("whole's header"); fl != nil {
		return nil, fl
	}
	p.need(len(w) >= preambleLen && string(w[:8]) == magic && w[8] == version && (w[9] == kindSieve || w[9] == kindJoins || w[9] == kindRange) && w[9] == h.Whole,
		at+21, "the whole's header is not a sieve or range header of the kind the shard names")
	if p.bad != nil {
		return nil, p.bad
	}
	h.WholeRecords = int(binary.BigEndian.Uint32(w[10:]))
	p.need(int(binary.BigEndian.Uint32(w[14:])) == len(w)-preambleLen, at+21, "the whole's header is cut")
	p.need(h.Of >= 1 && h.Of <= h.WholeRecords && h.Index >= 0 && h.Index < h.Of, at+1, "shard %d of %d of a whole of %d records", h.Index, h.Of, h.WholeRecords)
	if p.bad != nil {
		return nil, p.bad
	}
	// Shard i of n holds the whole's records [floor(i*R/n), floor((i+1)*R/n)).
	first, last := spanOf(h.Index, h.Of, h.WholeRecords)
	p.need(h.First == first && h.Count == last-first && h.Count == records, at+9, "shard %d of %d must hold records %d to %d, one per record of the file", h.Index, h.Of, first, last-1)
	if p.bad != nil {
		return nil, p.bad
	}
	var fl *Failure
	if h.Whole == kindRange {
		h.rng, fl = parseRangeHeader(w[preambleLen:], h.WholeRecords)
	} else {
		h.sieve, fl = parseSieveHeader(w[preambleLen:], h.Whole == kindJoins, h.WholeRecords)
	}
	if fl != nil {
		return nil, fl
	}
	return h, nil
}

// spanOf is share i of n of r records: [floor(i*r/n), floor((i+1)*r/n)).
func spanOf(i, n, r int) (from, upto int) {
	return int(int64(i) * int64(r) / int64(n)), int(int64(i+1) * int64(r) / int64(n))
}

// splitDepth is where the trie is cut into chunks: min(floor(j/2), 23).
func splitDepth(j int) int { return min(j/2, 23) }
