package cert

import (
	"encoding/binary"
	"fmt"
	"math/big"
)

// KindRange is a range certificate: every n in [Lo, Hi) justified, block by
// block, on top of a sieve certificate named by its root.
const KindRange = 'r'

// Caps on the lists of one block or header; a block beyond them is
// malformed, and the emitter refuses to write one.
const (
	MaxRecords1  = 1 << 16 // stopping-time records in one block or header
	MaxCycles    = 1 << 16 // cycles in one block or header
	MaxUndecided = 1 << 16 // undecided numbers in one block
	MaxBlockExp  = 62
)

// Point is a number with its stopping time.
type Point struct {
	N     *big.Int
	Sigma uint32
}

// CycleCount counts the numbers that reach the cycle whose smallest member
// is Min without first dropping below themselves.
type CycleCount struct {
	Min   *big.Int
	Count *big.Int
}

// Summary is what a block (or, summed, a whole range) establishes. Every
// number falls under exactly one of the five counts.
type Summary struct {
	Sieve     *big.Int // in a closing class above the small bound: T^t(n) < n, t its stopping time
	Join      *big.Int // in a joined survivor class above the small bound: meets n - delta after k steps
	Search    *big.Int // in a survivor class, found to drop below itself by iteration
	Small     *big.Int // at or below the small bound, found to drop by direct iteration
	Cycle     *big.Int // reach a cycle without dropping below themselves
	Undecided *big.Int // neither within the step cap

	SigmaSum *big.Int // sum of the stopping times of the numbers that drop
	MaxSigma uint32   // the largest of them, 0 if none drops
	MaxAt    *big.Int // the first n with it; nil if none drops

	Records []Point      // stopping-time records, increasing in n and in sigma
	Cycles  []CycleCount // increasing in Min

	// Rules[i]: the numbers of survivor classes justified by predecessor
	// rule i of the header, not searched (and not in the counts above, nor
	// in the stopping-time figures). One count per rule.
	Rules []*big.Int
}

// MaxRules bounds the predecessor rules of a range certificate.
const MaxRules = 16

// Rule is a predecessor rule (SPEC.md, section 9): for every q >= 0 the
// number n = M*q + C has the smaller predecessor m = Mp*q + Cp with
// T^Steps(m) = n, the parity of every step fixed by the class.
type Rule struct {
	M, C   uint64
	Mp, Cp uint64
	Steps  int
}

func (r Rule) String() string {
	return fmt.Sprintf("%d*q+%d <- %d*q+%d in %d steps", r.M, r.C, r.Mp, r.Cp, r.Steps)
}

// Prove checks the rule for every q at once, by affine arithmetic: it
// follows m = Mp*q + Cp as A*q + B for Steps steps, requiring A even before
// each step (so that the parity of A*q + B is that of B for every q), and
// the end to be M*q + C; and m < n for every q >= 0, with m >= 1.
func (r Rule) Prove(m Map) error {
	switch {
	case r.M == 0 || r.Mp == 0 || r.Cp == 0:
		return fmt.Errorf("rule %v: M, M' and c' must be positive", r)
	case r.Mp > r.M || r.Cp >= r.C:
		return fmt.Errorf("rule %v: the predecessor is not smaller for every q >= 0 (want M' <= M and c' < c)", r)
	case r.Steps < 1 || r.Steps > MaxRuleSteps:
		return fmt.Errorf("rule %v: want 1 to %d steps", r, MaxRuleSteps)
	}
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	A, B := new(big.Int).SetUint64(r.Mp), new(big.Int).SetUint64(r.Cp)
	for t := 1; t <= r.Steps; t++ {
		if A.Bit(0) == 1 {
			return fmt.Errorf("rule %v: before step %d the value is %v*q + %v, whose parity depends on q", r, t, A, B)
		}
		if B.Bit(0) == 1 {
			A.Mul(A, a)
			B.Mul(B, a).Add(B, b)
		}
		A.Rsh(A, 1)
		B.Rsh(B, 1)
	}
	if !A.IsUint64() || A.Uint64() != r.M || !B.IsUint64() || B.Uint64() != r.C {
		return fmt.Errorf("rule %v: after %d steps the predecessor is %v*q + %v, not %d*q + %d", r, r.Steps, A, B, r.M, r.C)
	}
	return nil
}

// MaxRuleSteps and MaxRuleModulus bound the fields of a predecessor rule.
const (
	MaxRuleSteps   = 64
	MaxRuleModulus = 1 << 62
)

// Block is one record of a range certificate.
type Block struct {
	Index       uint32     // position: the block covers [(B0+Index)*2^E, (B0+Index+1)*2^E) within [Lo, Hi)
	Summary                // counts as u64
	UndecidedNs []*big.Int // the undecided numbers, increasing
}

// RangeHeader is the kind 'r' header.
type RangeHeader struct {
	Map       Map
	SieveRoot Hash
	K         int // the sieve's modulus exponent (its step budget equals it)
	E         int // blocks are aligned intervals of 2^E numbers
	Cap       uint32
	Ceiling   int // W: an iterate of 2^W or more stops the search of a number, undecided
	Lo, Hi    *big.Int
	Rules     []Rule // predecessor rules, tried in order
	Blocks    int
	Totals    Summary
}

// RangeMinCeiling is the least ceiling W a range certificate over numbers
// below hi may state (SPEC.md, section 6): W >= bitlen(hi + |b|) +
// k*bitlen(a). Every iterate x_i with i <= k of a number below hi is then
// below 2^W (x_i < (hi + |b|)*a^i), so a search that jumps k steps at once
// cannot pass over an iterate at the ceiling.
func RangeMinCeiling(m Map, k int, hi *big.Int) int {
	b := int64(m.B)
	if b < 0 {
		b = -b
	}
	x := new(big.Int).Add(hi, big.NewInt(b))
	return x.BitLen() + k*big.NewInt(int64(m.A)).BitLen()
}

// DefaultRangeCeiling is the ceiling the writer states when none is
// given: DefaultCeiling of the bit length of hi - 1, raised to
// RangeMinCeiling if need be.
func DefaultRangeCeiling(m Map, k int, hi *big.Int) int {
	top := new(big.Int).Sub(hi, big.NewInt(1))
	return max(DefaultCeiling(top.BitLen()), RangeMinCeiling(m, k, hi))
}

// BlockSpan returns the number of blocks of [lo, hi) with blocks of 2^e,
// and the index of the first.
func BlockSpan(lo, hi *big.Int, e int) (first *big.Int, n *big.Int) {
	first = new(big.Int).Rsh(lo, uint(e))
	last := new(big.Int).Sub(hi, big.NewInt(1))
	last.Rsh(last, uint(e))
	return first, last.Sub(last, first).Add(last, big.NewInt(1))
}

func appendU128(b []byte, x *big.Int) []byte {
	var buf [16]byte
	x.FillBytes(buf[:])
	return append(b, buf[:]...)
}

func appendOptNat(b []byte, x *big.Int) []byte {
	if x == nil {
		return append(b, 0)
	}
	return appendNat(b, x)
}

func fits(x *big.Int, bits int) bool { return x != nil && x.Sign() >= 0 && x.BitLen() <= bits }

func (s *Summary) counts() []*big.Int {
	return append([]*big.Int{s.Sieve, s.Join, s.Search, s.Small, s.Cycle, s.Undecided}, s.Rules...)
}

func (s *Summary) appendCounts(b []byte, wide bool) ([]byte, error) {
	if len(s.Rules) > MaxRules {
		return nil, fmt.Errorf("%d rule counts exceed the cap of %d", len(s.Rules), MaxRules)
	}
	for _, c := range s.counts() {
		if wide {
			if !fits(c, 128) {
				return nil, fmt.Errorf("count %v does not fit 128 bits", c)
			}
			b = appendU128(b, c)
		} else {
			if !fits(c, 64) {
				return nil, fmt.Errorf("block count %v does not fit 64 bits", c)
			}
			b = binary.BigEndian.AppendUint64(b, c.Uint64())
		}
	}
	if !fits(s.SigmaSum, 128) {
		return nil, fmt.Errorf("stopping-time sum %v does not fit 128 bits", s.SigmaSum)
	}
	b = appendU128(b, s.SigmaSum)
	b = binary.BigEndian.AppendUint32(b, s.MaxSigma)
	b = appendOptNat(b, s.MaxAt)
	if len(s.Records) > MaxRecords1 || len(s.Cycles) > MaxCycles {
		return nil, fmt.Errorf("%d records and %d cycles exceed the caps", len(s.Records), len(s.Cycles))
	}
	b = binary.BigEndian.AppendUint32(b, uint32(len(s.Records)))
	for _, p := range s.Records {
		b = binary.BigEndian.AppendUint32(appendNat(b, p.N), p.Sigma)
	}
	b = binary.BigEndian.AppendUint32(b, uint32(len(s.Cycles)))
	for _, c := range s.Cycles {
		b = appendNat(b, c.Min)
		if wide {
			b = appendU128(b, c.Count)
		} else {
			b = binary.BigEndian.AppendUint64(b, c.Count.Uint64())
		}
	}
	return b, nil
}

// validate applies the format's rules on a summary's values.
func (s *Summary) validate() error {
	if (s.MaxAt == nil) != (s.MaxSigma == 0) {
		return fmt.Errorf("a largest stopping time of %d with first number %v", s.MaxSigma, s.MaxAt)
	}
	for i, p := range s.Records {
		if p.N == nil || p.N.Sign() <= 0 || natLen(p.N) > MaxNatBytes || p.Sigma == 0 {
			return fmt.Errorf("record %d: want a positive n and a positive stopping time", i)
		}
		if i > 0 && (s.Records[i-1].N.Cmp(p.N) >= 0 || s.Records[i-1].Sigma >= p.Sigma) {
			return fmt.Errorf("record %d: records must increase in n and in stopping time", i)
		}
	}
	for i, c := range s.Cycles {
		if c.Min == nil || c.Min.Sign() <= 0 || natLen(c.Min) > MaxNatBytes || c.Count == nil || c.Count.Sign() <= 0 {
			return fmt.Errorf("cycle %d: want a positive smallest member and a positive count", i)
		}
		if i > 0 && s.Cycles[i-1].Min.Cmp(c.Min) >= 0 {
			return fmt.Errorf("cycle %d: cycles must increase in their smallest member", i)
		}
	}
	return nil
}

func (d *decoder) u128(field string) *big.Int {
	if b := d.take(16, field); b != nil {
		return new(big.Int).SetBytes(b)
	}
	return nil
}

func (d *decoder) optNat(field string) *big.Int {
	if d.err == nil && d.off < len(d.buf) && d.buf[d.off] == 0 {
		d.off++
		return nil
	}
	return d.nat(field)
}

// summary reads a summary with rules rule counts (the header's rule
// count); wide counts are u128 (the header's), else u64.
func (d *decoder) summary(wide bool, rules int) Summary {
	var s Summary
	count := func() *big.Int {
		if wide {
			return d.u128("count")
		}
		return new(big.Int).SetUint64(d.u64("count"))
	}
	for _, c := range []**big.Int{&s.Sieve, &s.Join, &s.Search, &s.Small, &s.Cycle, &s.Undecided} {
		*c = count()
	}
	s.Rules = []*big.Int{}
	for range rules {
		s.Rules = append(s.Rules, count())
	}
	s.SigmaSum = d.u128("stopping-time sum")
	s.MaxSigma = d.u32("largest stopping time")
	s.MaxAt = d.optNat("first number with it")
	n := d.u32("record count")
	if d.err == nil && n > MaxRecords1 {
		d.err = formatErr(int64(d.off-4), "%d records exceed the cap of %d", n, MaxRecords1)
	}
	for i := uint32(0); i < n && d.err == nil; i++ {
		p := Point{N: d.nat("record n")}
		p.Sigma = d.u32("record stopping time")
		s.Records = append(s.Records, p)
	}
	n = d.u32("cycle count")
	if d.err == nil && n > MaxCycles {
		d.err = formatErr(int64(d.off-4), "%d cycles exceed the cap of %d", n, MaxCycles)
	}
	for i := uint32(0); i < n && d.err == nil; i++ {
		c := CycleCount{Min: d.nat("cycle minimum")}
		c.Count = count()
		s.Cycles = append(s.Cycles, c)
	}
	return s
}

// Marshal encodes a block record.
func (b *Block) Marshal() ([]byte, error) {
	if err := b.validate(); err != nil {
		return nil, err
	}
	out := binary.BigEndian.AppendUint32(nil, b.Index)
	out, err := b.Summary.appendCounts(out, false)
	if err != nil {
		return nil, err
	}
	out = binary.BigEndian.AppendUint32(out, uint32(len(b.UndecidedNs)))
	for _, n := range b.UndecidedNs {
		out = appendNat(out, n)
	}
	return out, nil
}

func (b *Block) validate() error {
	if err := b.Summary.validate(); err != nil {
		return fmt.Errorf("block %d: %v", b.Index, err)
	}
	if len(b.UndecidedNs) > MaxUndecided {
		return fmt.Errorf("block %d: %d undecided numbers exceed the cap of %d", b.Index, len(b.UndecidedNs), MaxUndecided)
	}
	if b.Summary.Undecided == nil || b.Summary.Undecided.Cmp(big.NewInt(int64(len(b.UndecidedNs)))) != 0 {
		return fmt.Errorf("block %d: counts %v undecided numbers and lists %d", b.Index, b.Summary.Undecided, len(b.UndecidedNs))
	}
	for i, n := range b.UndecidedNs {
		if n.Sign() <= 0 || natLen(n) > MaxNatBytes || (i > 0 && b.UndecidedNs[i-1].Cmp(n) >= 0) {
			return fmt.Errorf("block %d: undecided numbers must be positive and increasing", b.Index)
		}
	}
	return nil
}

// ParseBlock decodes a block record; base is its file offset, for errors.
// rules is the number of predecessor rules of the range's header, which
// fixes the number of rule counts.
func ParseBlock(rec []byte, base int64, rules int) (*Block, error) {
	d := decoder{buf: rec}
	b := &Block{Index: d.u32("block index")}
	b.Summary = d.summary(false, rules)
	n := d.u32("undecided count")
	if d.err == nil && n > MaxUndecided {
		d.err = formatErr(int64(d.off-4), "%d undecided numbers exceed the cap of %d", n, MaxUndecided)
	}
	for i := uint32(0); i < n && d.err == nil; i++ {
		b.UndecidedNs = append(b.UndecidedNs, d.nat("undecided number"))
	}
	if d.err == nil && d.off != len(rec) {
		d.err = formatErr(int64(d.off), "%d bytes after the last undecided number", len(rec)-d.off)
	}
	if d.err == nil {
		if err := b.validate(); err != nil {
			d.err = formatErr(0, "%v", err)
		}
	}
	if d.err != nil {
		if fe, ok := d.err.(*FormatError); ok {
			fe.Offset += base
		}
		return nil, d.err
	}
	return b, nil
}

// Marshal returns the complete header of a range certificate.
func (h *RangeHeader) Marshal() ([]byte, error) {
	if err := h.validate(); err != nil {
		return nil, err
	}
	body := binary.BigEndian.AppendUint32(nil, h.Map.A)
	body = binary.BigEndian.AppendUint32(body, uint32(h.Map.B))
	body = append(body, h.SieveRoot[:]...)
	body = append(body, byte(h.K), byte(h.E))
	body = binary.BigEndian.AppendUint32(body, h.Cap)
	body = binary.BigEndian.AppendUint16(body, uint16(h.Ceiling))
	body = appendNat(appendNat(body, h.Lo), h.Hi)
	body = append(body, byte(len(h.Rules)))
	for _, r := range h.Rules {
		for _, x := range []uint64{r.M, r.C, r.Mp, r.Cp} {
			body = binary.BigEndian.AppendUint64(body, x)
		}
		body = append(body, byte(r.Steps))
	}
	body, err := h.Totals.appendCounts(body, true)
	if err != nil {
		return nil, err
	}
	return appendPreamble(nil, KindRange, h.Blocks, body), nil
}

func (h *RangeHeader) validate() error {
	if err := h.Map.Validate(); err != nil {
		return err
	}
	switch {
	case h.K < 1 || h.K > MaxK:
		return fmt.Errorf("sieve k = %d: want 1 to %d", h.K, MaxK)
	case h.E < h.K || h.E > MaxBlockExp:
		return fmt.Errorf("block exponent %d: want k = %d to %d", h.E, h.K, MaxBlockExp)
	case h.Cap <= uint32(h.K) || h.Cap > MaxCap:
		return fmt.Errorf("cap = %d: want k+1 = %d to %d", h.Cap, h.K+1, MaxCap)
	case h.Lo == nil || h.Hi == nil || h.Lo.Sign() <= 0 || h.Lo.Cmp(h.Hi) >= 0 || natLen(h.Hi) > MaxNatBytes:
		return fmt.Errorf("range [%v, %v): want 1 <= from < to", h.Lo, h.Hi)
	}
	if w := RangeMinCeiling(h.Map, h.K, h.Hi); h.Ceiling < max(w, MinCeiling) || h.Ceiling > MaxCeiling {
		return fmt.Errorf("ceiling W = %d bits: want %d (and at least %d) to %d", h.Ceiling, w, MinCeiling, MaxCeiling)
	}
	if len(h.Rules) > MaxRules {
		return fmt.Errorf("%d rules: at most %d", len(h.Rules), MaxRules)
	}
	for _, r := range h.Rules {
		if r.Steps < 1 || r.Steps > MaxRuleSteps || r.M == 0 || r.M > MaxRuleModulus || r.C > MaxRuleModulus || r.Mp > MaxRuleModulus || r.Cp > MaxRuleModulus {
			return fmt.Errorf("rule %v: want 1 to %d steps and M, c, M', c' in 1..2^62 (M > 0)", r, MaxRuleSteps)
		}
	}
	if len(h.Totals.Rules) != len(h.Rules) {
		return fmt.Errorf("%d rules but %d rule counts in the totals", len(h.Rules), len(h.Totals.Rules))
	}
	_, n := BlockSpan(h.Lo, h.Hi, h.E)
	if !n.IsInt64() || n.Int64() != int64(h.Blocks) || h.Blocks > MaxRecords {
		return fmt.Errorf("%d blocks: the range [%v, %v) has %v blocks of 2^%d (at most %d)", h.Blocks, h.Lo, h.Hi, n, h.E, MaxRecords)
	}
	return h.Totals.validate()
}

// ParseRangeHeader decodes a complete header of kind 'r'.
func ParseRangeHeader(b []byte) (*RangeHeader, error) {
	p, err := parsePreamble(b)
	if err != nil {
		return nil, err
	}
	if p.kind != KindRange {
		return nil, formatErr(9, "kind %q is not a range certificate", p.kind)
	}
	if len(b) != PreambleSize+p.bodyLen {
		return nil, formatErr(int64(len(b)), "header is %d bytes, its length field says %d", len(b), PreambleSize+p.bodyLen)
	}
	d := decoder{buf: b, off: PreambleSize}
	h := &RangeHeader{Blocks: p.records}
	h.Map.A = d.u32("multiplier a")
	h.Map.B = int32(d.u32("constant b"))
	copy(h.SieveRoot[:], d.take(32, "sieve root"))
	h.K = int(d.u8("sieve k"))
	h.E = int(d.u8("block exponent"))
	h.Cap = d.u32("step cap")
	h.Ceiling = int(d.u16("ceiling"))
	h.Lo = d.nat("from")
	h.Hi = d.nat("to")
	nr := d.u8("rule count")
	if d.err == nil && nr > MaxRules {
		d.err = formatErr(int64(d.off-1), "%d rules exceed the cap of %d", nr, MaxRules)
	}
	h.Rules = []Rule{}
	for i := 0; i < int(nr) && d.err == nil; i++ {
		r := Rule{M: d.u64("rule modulus"), C: d.u64("rule class"), Mp: d.u64("predecessor modulus"), Cp: d.u64("predecessor class")}
		r.Steps = int(d.u8("rule steps"))
		h.Rules = append(h.Rules, r)
	}
	h.Totals = d.summary(true, len(h.Rules))
	if d.err != nil {
		return nil, d.err
	}
	if d.off != len(b) {
		return nil, formatErr(int64(d.off), "%d bytes after the last cycle", len(b)-d.off)
	}
	if err := h.validate(); err != nil {
		return nil, formatErr(PreambleSize, "%v", err)
	}
	return h, nil
}
