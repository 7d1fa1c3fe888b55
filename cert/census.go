package cert

import (
	"encoding/binary"
	"fmt"
	"math/big"
)

// KindCensus is a census certificate (SPEC.md, section 12): for every n in
// [Lo, Hi), where its orbit first meets the smallest member of a cycle,
// tabulated by height and delay per block, with records. The byte 't'
// ("tables") differs from every other kind in at least two bits, so that
// no single flipped bit turns one kind into another.
const KindCensus = 't'

// Caps on the lists of a census block or header (SPEC.md, section 12); a
// file beyond them is malformed, and the emitter refuses to write one.
const (
	MaxCensusCycles    = 1 << 16 // cycle sections in one block or header
	MaxCensusGroups    = 1 << 24 // delay groups in one cycle section
	MaxCensusHeights   = 1 << 24 // heights in one delay group
	MaxCensusRecords   = 1 << 16 // delay records, and path records, in one cycle section
	MaxCensusUndecided = 1 << 16 // undecided numbers in one block
	MinCensusBlockExp  = 1
	MaxCensusBlockExp  = 62
)

// HeightCount is one entry of a census table: Count numbers have this
// height (and the delay of their group).
type HeightCount struct {
	Height uint64 // odd steps of T to the cycle's smallest member
	Count  uint64
}

// DelayGroup holds the numbers of one delay in a cycle section: the first
// of them and how many have each height.
type DelayGroup struct {
	Delay   uint64   // standard steps (an+b and n/2 each count one) to the cycle's smallest member
	First   *big.Int // the smallest n with this delay
	Heights []HeightCount
}

// DelayRecord is a number whose delay exceeds that of every smaller number
// of its block (or range) that reaches the same cycle.
type DelayRecord struct {
	N     *big.Int
	Delay uint64
}

// PathRecord is a number whose peak exceeds that of every smaller number of
// its block (or range) that reaches the same cycle. The peak is the largest
// value of the standard trajectory from N to the cycle's smallest member.
type PathRecord struct {
	N, Peak *big.Int
}

// CycleCensus is what a census states about the numbers of a block (or
// range) that reach one cycle, named by its smallest member.
type CycleCensus struct {
	Min          *big.Int
	Groups       []DelayGroup // increasing in Delay
	DelayRecords []DelayRecord
	PathRecords  []PathRecord
}

// Numbers is how many numbers the section counts.
func (c *CycleCensus) Numbers() *big.Int {
	t := new(big.Int)
	for _, g := range c.Groups {
		for _, h := range g.Heights {
			t.Add(t, new(big.Int).SetUint64(h.Count))
		}
	}
	return t
}

// CensusSummary is a block's census, or (summed) a whole range's.
type CensusSummary struct {
	Cycles    []CycleCensus // increasing in Min
	Undecided uint64        // numbers whose census fate is undecided
}

// CensusBlock is one record of a census certificate.
type CensusBlock struct {
	Index uint32 // position: the block covers [(B0+Index)*2^E, (B0+Index+1)*2^E) within [Lo, Hi)
	CensusSummary
	UndecidedNs []*big.Int // the undecided numbers, increasing
}

// CensusHeader is the kind 't' header.
type CensusHeader struct {
	Map     Map
	Cap     uint32 // C: the census decides n only if its delay in steps of T and its cycle's period are at most C
	Ceiling int    // W: ... and every value of its orbit is below 2^W
	E       int    // blocks are aligned intervals of 2^E numbers
	Lo, Hi  *big.Int
	Blocks  int
	Totals  CensusSummary
}

// appendUvarint appends x as a varint (SPEC.md, section 2).
func appendUvarint(b []byte, x uint64) []byte { return binary.AppendUvarint(b, x) }

func (s *CensusSummary) append(b []byte) ([]byte, error) {
	if len(s.Cycles) > MaxCensusCycles {
		return nil, fmt.Errorf("cert: %d cycle sections exceed the cap of %d", len(s.Cycles), MaxCensusCycles)
	}
	b = appendUvarint(b, uint64(len(s.Cycles)))
	for i := range s.Cycles {
		c := &s.Cycles[i]
		b = appendNat(b, c.Min)
		b = appendUvarint(b, uint64(len(c.Groups)))
		for _, g := range c.Groups {
			b = appendUvarint(b, g.Delay)
			b = appendNat(b, g.First)
			b = appendUvarint(b, uint64(len(g.Heights)))
			for _, h := range g.Heights {
				b = appendUvarint(appendUvarint(b, h.Height), h.Count)
			}
		}
		b = appendUvarint(b, uint64(len(c.DelayRecords)))
		for _, r := range c.DelayRecords {
			b = appendUvarint(appendNat(b, r.N), r.Delay)
		}
		b = appendUvarint(b, uint64(len(c.PathRecords)))
		for _, r := range c.PathRecords {
			b = appendNat(appendNat(b, r.N), r.Peak)
		}
	}
	return appendUvarint(b, s.Undecided), nil
}

// validate applies the format's value rules to a summary.
func (s *CensusSummary) validate() error {
	if len(s.Cycles) > MaxCensusCycles {
		return fmt.Errorf("%d cycle sections exceed the cap of %d", len(s.Cycles), MaxCensusCycles)
	}
	positive := func(x *big.Int) bool { return x != nil && x.Sign() > 0 && natLen(x) <= MaxNatBytes }
	for i := range s.Cycles {
		c := &s.Cycles[i]
		if !positive(c.Min) {
			return fmt.Errorf("cycle section %d: want a positive smallest member", i)
		}
		if i > 0 && s.Cycles[i-1].Min.Cmp(c.Min) >= 0 {
			return fmt.Errorf("cycle section %d: sections must increase in the cycle's smallest member", i)
		}
		if len(c.Groups) < 1 || len(c.Groups) > MaxCensusGroups {
			return fmt.Errorf("cycle %v: %d delay groups; want 1 to %d", c.Min, len(c.Groups), MaxCensusGroups)
		}
		for j, g := range c.Groups {
			if j > 0 && c.Groups[j-1].Delay >= g.Delay {
				return fmt.Errorf("cycle %v: delay groups must increase in delay", c.Min)
			}
			if !positive(g.First) {
				return fmt.Errorf("cycle %v, delay %d: want a positive first number", c.Min, g.Delay)
			}
			if len(g.Heights) < 1 || len(g.Heights) > MaxCensusHeights {
				return fmt.Errorf("cycle %v, delay %d: %d heights; want 1 to %d", c.Min, g.Delay, len(g.Heights), MaxCensusHeights)
			}
			for k, h := range g.Heights {
				if k > 0 && g.Heights[k-1].Height >= h.Height {
					return fmt.Errorf("cycle %v, delay %d: heights must increase", c.Min, g.Delay)
				}
				if h.Height > g.Delay/2 {
					return fmt.Errorf("cycle %v, delay %d: height %d is more than half the delay", c.Min, g.Delay, h.Height)
				}
				if h.Count == 0 {
					return fmt.Errorf("cycle %v, delay %d, height %d: a count of 0 is not listed", c.Min, g.Delay, h.Height)
				}
			}
		}
		if len(c.DelayRecords) > MaxCensusRecords || len(c.PathRecords) > MaxCensusRecords {
			return fmt.Errorf("cycle %v: %d delay records and %d path records; at most %d each", c.Min, len(c.DelayRecords), len(c.PathRecords), MaxCensusRecords)
		}
		for j, r := range c.DelayRecords {
			if !positive(r.N) {
				return fmt.Errorf("cycle %v: delay record %d: want a positive n", c.Min, j)
			}
			if j > 0 && (c.DelayRecords[j-1].N.Cmp(r.N) >= 0 || c.DelayRecords[j-1].Delay >= r.Delay) {
				return fmt.Errorf("cycle %v: delay records must increase in n and in delay", c.Min)
			}
		}
		for j, r := range c.PathRecords {
			if !positive(r.N) || !positive(r.Peak) || r.Peak.Cmp(r.N) < 0 {
				return fmt.Errorf("cycle %v: path record %d: want a positive n and a peak at least n", c.Min, j)
			}
			if j > 0 && (c.PathRecords[j-1].N.Cmp(r.N) >= 0 || c.PathRecords[j-1].Peak.Cmp(r.Peak) >= 0) {
				return fmt.Errorf("cycle %v: path records must increase in n and in peak", c.Min)
			}
		}
	}
	return nil
}

// count adds up the numbers the summary counts, decided and undecided.
func (s *CensusSummary) count() *big.Int {
	t := new(big.Int).SetUint64(s.Undecided)
	for i := range s.Cycles {
		t.Add(t, s.Cycles[i].Numbers())
	}
	return t
}

// readSummary reads a summary with the census's varints.
func (d *decoder) censusSummary() CensusSummary {
	var s CensusSummary
	k := d.uvarint("cycle section count", MaxCensusCycles)
	for i := uint64(0); i < k && d.err == nil; i++ {
		c := CycleCensus{Min: d.nat("cycle minimum")}
		g := d.uvarint("delay group count", MaxCensusGroups)
		for j := uint64(0); j < g && d.err == nil; j++ {
			grp := DelayGroup{Delay: d.uvarint("delay", 1<<64-1)}
			grp.First = d.nat("first number with the delay")
			h := d.uvarint("height count", MaxCensusHeights)
			for l := uint64(0); l < h && d.err == nil; l++ {
				hc := HeightCount{Height: d.uvarint("height", 1<<64-1)}
				hc.Count = d.uvarint("count", 1<<64-1)
				grp.Heights = append(grp.Heights, hc)
			}
			c.Groups = append(c.Groups, grp)
		}
		r := d.uvarint("delay record count", MaxCensusRecords)
		for j := uint64(0); j < r && d.err == nil; j++ {
			rec := DelayRecord{N: d.nat("delay record n")}
			rec.Delay = d.uvarint("delay record delay", 1<<64-1)
			c.DelayRecords = append(c.DelayRecords, rec)
		}
		r = d.uvarint("path record count", MaxCensusRecords)
		for j := uint64(0); j < r && d.err == nil; j++ {
			rec := PathRecord{N: d.nat("path record n")}
			rec.Peak = d.nat("path record peak")
			c.PathRecords = append(c.PathRecords, rec)
		}
		s.Cycles = append(s.Cycles, c)
	}
	s.Undecided = d.uvarint("undecided count", 1<<64-1)
	return s
}

// uvarint reads a varint in shortest form (SPEC.md, section 2) of at most
// limit.
func (d *decoder) uvarint(field string, limit uint64) uint64 {
	if d.err != nil {
		return 0
	}
	v, n := binary.Uvarint(d.buf[d.off:])
	switch {
	case n == 0:
		d.err = formatErr(int64(d.off), "%s: the varint runs past the end", field)
		return 0
	case n < 0:
		d.err = formatErr(int64(d.off), "%s: the varint does not fit 64 bits", field)
		return 0
	case n != len(binary.AppendUvarint(nil, v)):
		d.err = formatErr(int64(d.off), "%s: the varint is not in shortest form", field)
		return 0
	case v > limit:
		d.err = formatErr(int64(d.off), "%s: %d exceeds the cap of %d", field, v, limit)
		return 0
	}
	d.off += n
	return v
}

// Marshal encodes a census block record.
func (b *CensusBlock) Marshal() ([]byte, error) {
	if err := b.validate(); err != nil {
		return nil, fmt.Errorf("cert: %v", err)
	}
	out := binary.BigEndian.AppendUint32(nil, b.Index)
	out, err := b.CensusSummary.append(out)
	if err != nil {
		return nil, err
	}
	for _, n := range b.UndecidedNs {
		out = appendNat(out, n)
	}
	return out, nil
}

func (b *CensusBlock) validate() error {
	if err := b.CensusSummary.validate(); err != nil {
		return fmt.Errorf("block %d: %v", b.Index, err)
	}
	if b.Undecided > MaxCensusUndecided || b.Undecided != uint64(len(b.UndecidedNs)) {
		return fmt.Errorf("block %d: counts %d undecided numbers and lists %d (at most %d)", b.Index, b.Undecided, len(b.UndecidedNs), MaxCensusUndecided)
	}
	for i, n := range b.UndecidedNs {
		if n == nil || n.Sign() <= 0 || natLen(n) > MaxNatBytes || (i > 0 && b.UndecidedNs[i-1].Cmp(n) >= 0) {
			return fmt.Errorf("block %d: undecided numbers must be positive and increasing", b.Index)
		}
	}
	return nil
}

// Numbers is how many numbers the block counts, decided and undecided.
func (b *CensusBlock) Numbers() *big.Int { return b.count() }

// ParseCensusBlock decodes a census block record; base is its file offset,
// for errors. That its counts add up to the numbers of its block, which
// the header fixes, is checked by CheckCensusBlockSpan.
func ParseCensusBlock(rec []byte, base int64) (*CensusBlock, error) {
	d := decoder{buf: rec}
	b := &CensusBlock{Index: d.u32("block index")}
	b.CensusSummary = d.censusSummary()
	if d.err == nil && b.Undecided > MaxCensusUndecided {
		d.err = formatErr(int64(d.off-1), "%d undecided numbers exceed the cap of %d", b.Undecided, MaxCensusUndecided)
	}
	for i := uint64(0); i < b.Undecided && d.err == nil; i++ {
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

// CensusBlockBounds returns the numbers block i of the header's range
// covers: [lo, hi).
func (h *CensusHeader) CensusBlockBounds(i int) (lo, hi *big.Int) {
	first, _ := BlockSpan(h.Lo, h.Hi, h.E)
	x0 := new(big.Int).Add(first, big.NewInt(int64(i)))
	x0.Lsh(x0, uint(h.E))
	lo = x0
	if lo.Cmp(h.Lo) < 0 {
		lo = new(big.Int).Set(h.Lo)
	}
	hi = new(big.Int).Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(h.E)))
	if hi.Cmp(h.Hi) > 0 {
		hi = new(big.Int).Set(h.Hi)
	}
	return lo, hi
}

// CheckCensusBlockSpan applies the value rules that tie a block to its
// header: its index is its global position i, and its counts add up to
// the numbers of that block. base is the record's file offset.
func (h *CensusHeader) CheckCensusBlockSpan(b *CensusBlock, i int, base int64) error {
	if int(b.Index) != i {
		return formatErr(base, "block index %d at position %d", b.Index, i)
	}
	lo, hi := h.CensusBlockBounds(i)
	if n := hi.Sub(hi, lo); b.count().Cmp(n) != 0 {
		return formatErr(base, "block %d counts %v numbers; it has %v", i, b.count(), n)
	}
	return nil
}

// Marshal returns the complete header of a census certificate.
func (h *CensusHeader) Marshal() ([]byte, error) {
	if err := h.validate(); err != nil {
		return nil, fmt.Errorf("cert: %v", err)
	}
	body := binary.BigEndian.AppendUint32(nil, h.Map.A)
	body = binary.BigEndian.AppendUint32(body, uint32(h.Map.B))
	body = binary.BigEndian.AppendUint32(body, h.Cap)
	body = binary.BigEndian.AppendUint16(body, uint16(h.Ceiling))
	body = append(body, byte(h.E))
	body = appendNat(appendNat(body, h.Lo), h.Hi)
	body, err := h.Totals.append(body)
	if err != nil {
		return nil, err
	}
	if len(body) > MaxHeaderBody {
		return nil, fmt.Errorf("cert: a census header of %d bytes exceeds the cap of %d", len(body), MaxHeaderBody)
	}
	return appendPreamble(nil, KindCensus, h.Blocks, body), nil
}

// CensusSpanOK says whether a census may cover [lo, hi): fewer than 2^64
// numbers, so that every count it states fits a varint.
func CensusSpanOK(lo, hi *big.Int) bool { return new(big.Int).Sub(hi, lo).BitLen() <= 64 }

func (h *CensusHeader) validate() error {
	if err := h.Map.Validate(); err != nil {
		return err
	}
	switch {
	case h.Cap < 1 || h.Cap > MaxCap:
		return fmt.Errorf("cap = %d: want 1 to %d", h.Cap, MaxCap)
	case h.Ceiling < MinCeiling || h.Ceiling > MaxCeiling:
		return fmt.Errorf("ceiling W = %d bits: want %d to %d", h.Ceiling, MinCeiling, MaxCeiling)
	case h.E < MinCensusBlockExp || h.E > MaxCensusBlockExp:
		return fmt.Errorf("block exponent %d: want %d to %d", h.E, MinCensusBlockExp, MaxCensusBlockExp)
	case h.Lo == nil || h.Hi == nil || h.Lo.Sign() <= 0 || h.Lo.Cmp(h.Hi) >= 0 || natLen(h.Hi) > MaxNatBytes:
		return fmt.Errorf("range [%v, %v): want 1 <= from < to", h.Lo, h.Hi)
	case !CensusSpanOK(h.Lo, h.Hi):
		return fmt.Errorf("range [%v, %v): a census covers fewer than 2^64 numbers", h.Lo, h.Hi)
	case h.Hi.Cmp(new(big.Int).Lsh(big.NewInt(1), uint(h.Ceiling))) > 0:
		return fmt.Errorf("range [%v, %v): every number must lie below the ceiling 2^%d", h.Lo, h.Hi, h.Ceiling)
	}
	_, n := BlockSpan(h.Lo, h.Hi, h.E)
	if !n.IsInt64() || n.Int64() != int64(h.Blocks) || h.Blocks > MaxRecords {
		return fmt.Errorf("%d blocks: the range [%v, %v) has %v blocks of 2^%d (at most %d)", h.Blocks, h.Lo, h.Hi, n, h.E, MaxRecords)
	}
	return h.Totals.validate()
}

// ParseCensusHeader decodes a complete header of kind 't'.
func ParseCensusHeader(b []byte) (*CensusHeader, error) {
	p, err := parsePreamble(b)
	if err != nil {
		return nil, err
	}
	if p.kind != KindCensus {
		return nil, formatErr(9, "kind %q is not a census certificate", p.kind)
	}
	if len(b) != PreambleSize+p.bodyLen {
		return nil, formatErr(int64(len(b)), "header is %d bytes, its length field says %d", len(b), PreambleSize+p.bodyLen)
	}
	d := decoder{buf: b, off: PreambleSize}
	h := &CensusHeader{Blocks: p.records}
	h.Map.A = d.u32("multiplier a")
	h.Map.B = int32(d.u32("constant b"))
	h.Cap = d.u32("step cap")
	h.Ceiling = int(d.u16("ceiling"))
	h.E = int(d.u8("block exponent"))
	h.Lo = d.nat("from")
	h.Hi = d.nat("to")
	h.Totals = d.censusSummary()
	if d.err != nil {
		return nil, d.err
	}
	if d.off != len(b) {
		return nil, formatErr(int64(d.off), "%d bytes after the undecided count", len(b)-d.off)
	}
	if err := h.validate(); err != nil {
		return nil, formatErr(PreambleSize, "%v", err)
	}
	return h, nil
}

// DefaultCensusCeiling is the ceiling the writer states when none is given:
// DefaultCeiling of the bit length of hi - 1.
func DefaultCensusCeiling(hi *big.Int) int {
	return DefaultCeiling(new(big.Int).Sub(hi, big.NewInt(1)).BitLen())
}

// WorkBound is the most steps of T that deriving the block may take
// (SPEC.md, section 12, "Work"): N + K*C + S + 8*C*U, with N its numbers,
// K its cycle sections, S the sum of c*(D - h) over its table entries and U
// its undecided numbers.
func (b *CensusBlock) WorkBound(cap uint32) *big.Int {
	c := new(big.Int).SetUint64(uint64(cap))
	w := b.count()
	w.Add(w, new(big.Int).Mul(c, big.NewInt(int64(len(b.Cycles)))))
	w.Add(w, new(big.Int).Mul(c, new(big.Int).SetUint64(8*b.Undecided)))
	for i := range b.Cycles {
		for _, g := range b.Cycles[i].Groups {
			for _, h := range g.Heights {
				w.Add(w, new(big.Int).Mul(new(big.Int).SetUint64(h.Count), new(big.Int).SetUint64(g.Delay-h.Height)))
			}
		}
	}
	return w
}
