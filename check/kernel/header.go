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

func (m Map) String() string {
	if m.B < 0 {
		return fmt.Sprintf("%dn%d", m.A, m.B)
	}
	return fmt.Sprintf("%dn+%d", m.A, m.B)
}

// The fates of a number (SPEC.md, section 1, "Fates"), and the six counts
// of a summary in the order of the format (section 6).
const (
	Descends, Cycle, Undecided                         = 1, 2, 3
	CSieve, CJoin, CSearch, CSmall, CCycle, CUndecided = 0, 1, 2, 3, 4, 5
)

var countNames = [6]string{"numbers justified by the sieve", "numbers justified by a join", "numbers found to drop by search",
	"small numbers found to drop by direct iteration", "numbers that reach a cycle", "undecided numbers"}

// Fate is the fate of N: Descends after Steps steps, Cycle with the
// cycle's smallest member CycleMin, or Undecided.
type Fate struct {
	N, CycleMin *big.Int
	Kind        byte
	Steps       uint32
}

func (e Fate) same(x Fate) bool {
	return e.Kind == x.Kind && e.Steps == x.Steps && (e.Kind != Cycle || e.CycleMin.Cmp(x.CycleMin) == 0)
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

func (r Rule) String() string {
	return fmt.Sprintf("%d*q+%d <- %d*q+%d in %d steps", r.M, r.C, r.Mp, r.Cp, r.Steps)
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

// fields reads a header body or a block record; base is its offset in the
// file, so that an error names the file's offset.
type fields struct {
	b    []byte
	pos  int
	base int64
	bad  *Failure
}

func (p *fields) next(n int, what string) []byte {
	if p.bad == nil && len(p.b)-p.pos < n {
		p.bad = malformed(p.base+int64(p.pos), "the header ends inside the %s", what)
	}
	if p.bad != nil {
		return make([]byte, min(n, 32)) // zeros, never sized by the input: the caller stops at p.bad
	}
	p.pos += n
	return p.b[p.pos-n : p.pos]
}

func (p *fields) u8(what string) int               { return int(p.next(1, what)[0]) }
func (p *fields) u16(what string) int              { return int(binary.BigEndian.Uint16(p.next(2, what))) }
func (p *fields) u32(what string) uint32           { return binary.BigEndian.Uint32(p.next(4, what)) }
func (p *fields) u64(what string) uint64           { return binary.BigEndian.Uint64(p.next(8, what)) }
func (p *fields) wide(n int, what string) *big.Int { return new(big.Int).SetBytes(p.next(n, what)) }

func (p *fields) natural(what string) *big.Int {
	at := p.base + int64(p.pos)
	n := p.u8(what)
	if p.bad == nil && n == 0 {
		p.bad = malformed(at, "%s has length 0", what)
	}
	if b := p.next(n, what); p.bad == nil && b[0] == 0 {
		p.bad = malformed(at+1, "%s starts with a zero byte, which is not canonical", what)
	} else if p.bad == nil {
		return new(big.Int).SetBytes(b)
	}
	return new(big.Int)
}

// list reads a count and checks it against the cap before anything is
// allocated for it.
func (p *fields) list(what string) int {
	if n := p.u32(what); p.bad == nil && n > MaxList {
		p.bad = malformed(p.base+int64(p.pos-4), "%d %s; the format allows %d", n, what, MaxList)
	} else if p.bad == nil {
		return int(n)
	}
	return 0
}

// rest fails unless the body ends here.
func (p *fields) rest(after string) *Failure {
	if p.bad == nil && p.pos != len(p.b) {
		return malformed(p.base+int64(p.pos), "%d bytes follow the %s", len(p.b)-p.pos, after)
	}
	return p.bad
}

func parseSieveHeader(body []byte, joins bool) (*SieveHeader, *Failure) {
	p := &fields{b: body, base: preambleLen}
	h := &SieveHeader{Map: Map{p.u32("multiplier"), int32(p.u32("constant"))}, K: p.u8("k"), J: p.u8("j")}
	h.Cap, h.Ceiling, h.Survivors = p.u32("step cap"), p.u16("ceiling"), p.u64("survivor count")
	if h.Joins = joins; joins {
		h.Joined = p.u64("joined count")
	}
	if p.bad == nil && (h.K < 1 || h.K > maxK || h.J < 1 || h.J > h.K) {
		return nil, malformed(preambleLen+8, "k = %d and j = %d: the format needs 1 <= j <= k <= %d", h.K, h.J, maxK)
	}
	for t := 0; t < h.J && p.bad == nil; t++ {
		h.ClosedAt = append(h.ClosedAt, p.u64("closing counts"))
	}
	count := p.u32("exception count")
	if p.bad == nil && count > maxExc {
		return nil, malformed(p.base+int64(p.pos-4), "%d exceptions; the format allows %d", count, maxExc)
	}
	for i := uint32(0); i < count && p.bad == nil; i++ {
		at := p.base + int64(p.pos)
		e := Fate{N: p.natural("exception"), Kind: byte(p.u8("fate"))}
		switch e.Kind {
		case Descends:
			e.Steps = p.u32("steps")
		case Cycle:
			e.CycleMin = p.natural("cycle minimum")
		case Undecided:
		default:
			if p.bad == nil {
				p.bad = malformed(at, "exception %d has fate %d; fates are 1, 2 and 3", i, e.Kind)
			}
		}
		h.Exceptions = append(h.Exceptions, e)
	}
	if fl := p.rest("last exception inside the header"); fl != nil {
		return nil, fl
	}
	return h, nil
}

// sane applies the value rules of a sieve header (SPEC.md, section 2).
func (h *SieveHeader) sane(records int) *Failure {
	const at = preambleLen
	if fl := h.Map.sane(); fl != nil {
		return fl
	}
	switch {
	case h.Cap < 1 || h.Cap > maxCap:
		return malformed(at+10, "step cap %d: the format allows 1 to %d", h.Cap, maxCap)
	case h.Ceiling < minCeiling || h.Ceiling > maxCeiling:
		return malformed(at+14, "ceiling %d bits: the format allows %d to %d", h.Ceiling, minCeiling, maxCeiling)
	case h.Joins && h.J != h.K:
		return malformed(at+9, "a sieve with joins needs j = k; this one has j = %d, k = %d", h.J, h.K)
	case h.Joins && h.Joined > h.Survivors:
		return malformed(at+24, "a sieve with joins claims %d joined of its %d survivors", h.Joined, h.Survivors)
	case records < 2 || records-1 > 1<<splitDepth(h.J):
		return malformed(10, "%d records: a trie cut at depth %d has 1 to %d classes below the top", records, splitDepth(h.J), 1<<splitDepth(h.J))
	}
	for i, e := range h.Exceptions {
		if i > 0 && h.Exceptions[i-1].N.Cmp(e.N) >= 0 {
			return malformed(at, "exception %v is out of increasing order", e.N)
		}
		switch {
		case e.Kind == Descends && (e.Steps < 1 || e.Steps > h.Cap):
			return malformed(at, "exception %v descends after %d steps; the cap is %d", e.N, e.Steps, h.Cap)
		case e.Kind == Cycle && e.CycleMin.Cmp(e.N) < 0:
			return malformed(at, "exception %v reaches a cycle whose smallest member %v is below it", e.N, e.CycleMin)
		}
	}
	return nil
}

func (m Map) sane() *Failure {
	if m.A < 3 || m.A%2 == 0 {
		return malformed(preambleLen, "multiplier %d: the format needs an odd a >= 3", m.A)
	}
	if m.B%2 == 0 || int64(m.B) <= -int64(m.A) {
		return malformed(preambleLen+4, "constant %d: the format needs an odd b > -a", m.B)
	}
	return nil
}

// versionFailure reports a file of another format version, with the
// remedy for an older one.
func versionFailure(v byte) *Failure {
	fl := malformed(8, "unknown format version %d; this checker reads version %d", v, version)
	fl.Reason = ReasonVersion
	if v < version {
		fl.Msg = fmt.Sprintf("format version %d is an older format that this checker no longer reads (it reads version %d)", v, version)
		fl.Hint = "re-emit the certificate with this version of descent"
	}
	return fl
}

// summary reads a summary with the given number of rule counts; counts
// are u128 in a header (wide) and u64 in a block.
func (p *fields) summary(wide bool, rules int) Summary {
	var s Summary
	count := func(what string) *big.Int { return p.wide(8+8*bit(wide), what) }
	for i := range s.Counts {
		s.Counts[i] = count(countNames[i])
	}
	s.Rules = []*big.Int{}
	for range rules {
		s.Rules = append(s.Rules, count("rule count"))
	}
	s.Sum, s.MaxSigma = p.wide(16, "stopping-time sum"), p.u32("largest stopping time")
	if p.bad == nil && p.pos < len(p.b) && p.b[p.pos] == 0 {
		p.pos++ // an optional natural: none
	} else {
		s.MaxAt = p.natural("first number with it")
	}
	for range p.list("records") {
		s.Records = append(s.Records, Point{p.natural("record"), p.u32("record stopping time")})
	}
	for range p.list("cycles") {
		s.Cycles = append(s.Cycles, CycleCount{p.natural("cycle minimum"), count("cycle count")})
	}
	return s
}

// sane applies the rules on the values of a summary.
func (s *Summary) sane(at int64, where string) *Failure {
	if (s.MaxAt == nil) != (s.MaxSigma == 0) {
		return malformed(at, "%s: a largest stopping time of %d with first number %v", where, s.MaxSigma, s.MaxAt)
	}
	for i, r := range s.Records {
		if r.Sigma == 0 || (i > 0 && (s.Records[i-1].N.Cmp(r.N) >= 0 || s.Records[i-1].Sigma >= r.Sigma)) {
			return malformed(at, "%s: records must increase in n and in stopping time", where)
		}
	}
	for i, c := range s.Cycles {
		if c.Count.Sign() == 0 || (i > 0 && s.Cycles[i-1].Min.Cmp(c.Min) >= 0) {
			return malformed(at, "%s: cycles must increase in their smallest member and count at least one number", where)
		}
	}
	return nil
}

func parseRangeHeader(body []byte, records int) (*RangeHeader, *Failure) {
	p := &fields{b: body, base: preambleLen}
	h := &RangeHeader{Map: Map{p.u32("multiplier"), int32(p.u32("constant"))}, SieveRoot: Hash(p.next(32, "sieve root"))}
	h.K, h.E, h.Cap, h.Ceiling = p.u8("sieve k"), p.u8("block exponent"), p.u32("step cap"), p.u16("ceiling")
	h.Lo, h.Hi = p.natural("from"), p.natural("to")
	nr := p.u8("rules")
	if p.bad == nil && nr > maxRules {
		return nil, malformed(p.base+int64(p.pos-1), "%d predecessor rules; the format allows %d", nr, maxRules)
	}
	h.Rules = []Rule{}
	for range nr {
		r := Rule{M: p.u64("rule modulus"), C: p.u64("rule class"), Mp: p.u64("predecessor modulus"), Cp: p.u64("predecessor class"), Steps: p.u8("rule steps")}
		if p.bad == nil && (r.Steps < 1 || r.Steps > maxRuleSteps || r.M < 1 || max(r.M, r.C, r.Mp, r.Cp) > 1<<62) {
			return nil, malformed(p.base+int64(p.pos-33), "predecessor rule %v: the format needs 1 to %d steps and M, c, M', c' at most 2^62, M > 0", r, maxRuleSteps)
		}
		h.Rules = append(h.Rules, r)
	}
	h.Totals = p.summary(true, len(h.Rules))
	if fl := p.rest("last cycle inside the header"); fl != nil {
		return nil, fl
	}
	const at = preambleLen
	if fl := h.Map.sane(); fl != nil {
		return nil, fl
	}
	switch {
	case h.K < 1 || h.K > maxK || h.E < h.K || h.E > maxBlockExp:
		return nil, malformed(at+40, "sieve k = %d and block exponent %d: the format needs 1 <= k <= e <= %d", h.K, h.E, maxBlockExp)
	case h.Cap <= uint32(h.K) || h.Cap > maxCap:
		return nil, malformed(at+42, "step cap %d: the format allows k+1 = %d to %d", h.Cap, h.K+1, maxCap)
	case h.Lo.Cmp(h.Hi) >= 0:
		return nil, malformed(at+48, "the range [%v, %v) is empty", h.Lo, h.Hi)
	}
	// Every iterate x_i, i <= k, of a number below hi is below
	// (hi + |b|)*a^i, so below 2^W: the k steps a search jumps never
	// reach the ceiling (SPEC.md, section 6).
	w := new(big.Int).Add(h.Hi, big.NewInt(int64(max(h.B, -h.B)))).BitLen() + h.K*big.NewInt(int64(h.A)).BitLen()
	if h.Ceiling < max(w, minCeiling) || h.Ceiling > maxCeiling {
		return nil, malformed(at+46, "ceiling %d bits: the format needs %d to %d here (at least bitlen(hi + |b|) + k*bitlen(a) = %d and %d)",
			h.Ceiling, max(w, minCeiling), maxCeiling, w, minCeiling)
	}
	h.first = new(big.Int).Rsh(h.Lo, uint(h.E))
	last := new(big.Int).Sub(h.Hi, big.NewInt(1))
	last.Rsh(last, uint(h.E)).Sub(last, h.first)
	if !last.IsInt64() || last.Int64()+1 != int64(records) {
		return nil, malformed(10, "the preamble declares %d records; [%v, %v) has %v blocks of 2^%d", records, h.Lo, h.Hi, last.Add(last, big.NewInt(1)), h.E)
	}
	return h, h.Totals.sane(at, "header")
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
	b.Summary = p.summary(false, len(h.Rules))
	for range p.list("undecided numbers") {
		b.Undecided = append(b.Undecided, p.natural("undecided number"))
	}
	if fl := p.rest("last undecided number of the block"); fl != nil {
		return nil, fl
	}
	if fl := b.Summary.sane(base, "block"); fl != nil {
		return nil, fl
	}
	u := b.Summary.Counts[CUndecided]
	if !u.IsInt64() || int64(len(b.Undecided)) != u.Int64() {
		return nil, malformed(base, "the block counts %v undecided numbers and lists %d", u, len(b.Undecided))
	}
	for i := 1; i < len(b.Undecided); i++ {
		if b.Undecided[i-1].Cmp(b.Undecided[i]) >= 0 {
			return nil, malformed(base, "undecided numbers must increase")
		}
	}
	if b.Index != uint32(g) {
		return nil, malformed(base, "record %d says it is block %d", g, b.Index)
	}
	sum := new(big.Int)
	for _, c := range append(b.Summary.Counts[:], b.Summary.Rules...) {
		sum.Add(sum, c)
	}
	if lo, hi := h.Bounds(g); sum.Cmp(hi.Sub(hi, lo)) != 0 {
		return nil, malformed(base, "block %d counts %v numbers; it has %v", g, sum, hi)
	}
	return b, nil
}

func parseShardHeader(body []byte, records int) (*ShardHeader, *Failure) {
	p := &fields{b: body, base: preambleLen}
	h := &ShardHeader{Whole: byte(p.u8("whole kind")), Index: int(p.u32("shard index")), Of: int(p.u32("shard count")),
		First: int(p.u32("first record")), Count: int(p.u32("record count"))}
	w := p.next(int(p.u32("whole header length")), "whole header")
	if fl := p.rest("whole's header"); fl != nil {
		return nil, fl
	}
	if len(w) < preambleLen || string(w[:8]) != magic || w[8] != version || (w[9] != kindSieve && w[9] != kindJoins && w[9] != kindRange) || w[9] != h.Whole {
		return nil, malformed(preambleLen+21, "the whole's header is not a sieve or range header of the kind the shard names")
	}
	h.WholeRecords = int(binary.BigEndian.Uint32(w[10:]))
	if int(binary.BigEndian.Uint32(w[14:])) != len(w)-preambleLen {
		return nil, malformed(preambleLen+21, "the whole's header is cut")
	}
	if h.Of < 1 || h.Of > h.WholeRecords || h.Index < 0 || h.Index >= h.Of {
		return nil, malformed(preambleLen+1, "shard %d of %d of a whole of %d records", h.Index, h.Of, h.WholeRecords)
	}
	// Shard i of n holds the whole's records [floor(i*R/n), floor((i+1)*R/n)).
	first, last := spanOf(h.Index, h.Of, h.WholeRecords)
	if h.First != first || h.Count != last-first || h.Count != records {
		return nil, malformed(preambleLen+9, "shard %d of %d must hold records %d to %d, one per record of the file", h.Index, h.Of, first, last-1)
	}
	var fl *Failure
	if h.Whole == kindRange {
		h.rng, fl = parseRangeHeader(w[preambleLen:], h.WholeRecords)
	} else if h.sieve, fl = parseSieveHeader(w[preambleLen:], h.Whole == kindJoins); fl == nil {
		fl = h.sieve.sane(h.WholeRecords)
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

func bit(b bool) int {
	if b {
		return 1
	}
	return 0
}
