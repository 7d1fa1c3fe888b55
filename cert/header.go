package cert

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"strconv"
	"strings"
)

// Map is T(n) = n/2 for even n, (A*n + B)/2 for odd n.
type Map struct {
	A uint32
	B int32
}

// Collatz is the default map, 3n+1.
var Collatz = Map{A: 3, B: 1}

// ParseMap reads the command-line form of a map: "3n+1", "3n-1", "5n+1".
func ParseMap(s string) (Map, error) {
	t := strings.ReplaceAll(s, " ", "")
	i := strings.IndexByte(t, 'n')
	if i <= 0 || i+1 >= len(t) || (t[i+1] != '+' && t[i+1] != '-') {
		return Map{}, fmt.Errorf("map %q: want the form an+b or an-b, such as 3n+1", s)
	}
	a, err := strconv.ParseUint(t[:i], 10, 32)
	if err != nil {
		return Map{}, fmt.Errorf("map %q: the multiplier %s is not a whole number below 2^32", s, t[:i])
	}
	b, err := strconv.ParseInt(t[i+1:], 10, 32)
	if err != nil {
		return Map{}, fmt.Errorf("map %q: the constant %s is not a whole number between -2^31 and 2^31", s, t[i+1:])
	}
	m := Map{A: uint32(a), B: int32(b)}
	return m, m.Validate()
}

// Validate checks the conditions of SPEC.md, "Maps": A odd and at least 3,
// B odd and B > -A, so that T sends positive integers to positive integers.
func (m Map) Validate() error {
	switch {
	case m.A < 3 || m.A%2 == 0:
		return fmt.Errorf("map %v: the multiplier must be odd and at least 3", m)
	case m.B%2 == 0:
		return fmt.Errorf("map %v: the constant must be odd, so that a*n+b is even for odd n", m)
	case int64(m.B) <= -int64(m.A):
		return fmt.Errorf("map %v: the constant must exceed -%d, so that T keeps n positive", m, m.A)
	}
	return nil
}

func (m Map) String() string {
	if m.B < 0 {
		return fmt.Sprintf("%dn%d", m.A, m.B)
	}
	return fmt.Sprintf("%dn+%d", m.A, m.B)
}

// FateKind says what direct iteration found for an exception.
type FateKind uint8

const (
	Descends  FateKind = 1 // T^i(n) < n for some i <= cap
	Cycle     FateKind = 2 // the orbit repeats within cap steps, never below n
	Undecided FateKind = 3 // neither within cap steps
)

func (f FateKind) String() string {
	switch f {
	case Descends:
		return "descends"
	case Cycle:
		return "cycle"
	case Undecided:
		return "undecided"
	}
	return fmt.Sprintf("fate(%d)", uint8(f))
}

// Exception is a member n of a closed class at or below the class's
// threshold, with its fate.
type Exception struct {
	N        *big.Int
	Fate     FateKind
	Steps    uint32   // Descends: the first i with T^i(n) < n
	CycleMin *big.Int // Cycle: the smallest member of the cycle reached
}

// Caps on what a header may claim. Each bounds an allocation or a loop that
// the input steers; a header beyond a cap is malformed.
const (
	MaxHeaderBody = 1 << 20 // bytes of kind-specific header
	MaxExceptions = 1 << 16 // listed exceptions
	MaxCap        = 1 << 24 // step cap for fates
	MaxNatBytes   = 255     // length of one natural number
	MaxK          = 64

	// MinCeiling and MaxCeiling bound the ceiling W, in bits: following an
	// orbit stops, undecided, at the first iterate of 2^W or more. Every
	// value the fate rule and the search compute is thus below 2^W, so a
	// step costs at most W/64 machine words; W >= 128 lets both sides keep
	// the 128-bit arithmetic of their fast paths without a ceiling test.
	MinCeiling = 128
	MaxCeiling = 8192
)

// DefaultCeiling is the ceiling the writer states when none is given, for
// a certificate whose largest number followed has L bits (a sieve: the
// exception bound; a range: hi - 1): W = max(128, 2L + 64). Orbits of 3n+1
// peak near n^2 (the path records, OEIS A006884 with their maxima A006885,
// stay below n^2 * 2^4 as far as they are listed), so a 3n+1 orbit stops at
// the ceiling only if it climbs 2^60 times higher than any known one; maps
// whose orbits diverge (5n+1) stop after a few hundred steps instead of
// running to the step cap on ever larger numbers.
func DefaultCeiling(L int) int { return max(MinCeiling, 2*L+64) }

// SieveHeader is the kind 's' header: the claim of a sieve certificate.
type SieveHeader struct {
	Map       Map
	K, J      int
	Cap       uint32
	Ceiling   int    // W: an iterate of 2^W or more stops a fate, undecided
	Chunks    int    // number of chunk records, the top chunk included
	Survivors uint64 // residues mod 2^K that survive J steps
	// Joins: a sieve with joins (kind 'j', j = k) lists, for each joined
	// survivor, a smaller partner; Joined counts them (SPEC.md, section 8).
	Joins      bool
	Joined     uint64
	ClosedAt   []uint64 // ClosedAt[t-1]: classes mod 2^t closing at step t, t = 1..J
	Exceptions []Exception
}

// SplitDepth is the depth D at which the trie is cut into chunks: the top
// chunk holds depths 0..D, every other chunk one class open at depth D.
// D = min(floor(j/2), 23), so that a certificate has at most 2^23 + 1
// chunks whatever the map (MaxRecords is 2^24).
func SplitDepth(j int) int { return min(j/2, MaxSplit) }

// MaxSplit is the largest split depth.
const MaxSplit = 23

// Marshal returns the complete header: preamble and body.
func (h *SieveHeader) Marshal() ([]byte, error) {
	if err := h.validate(); err != nil {
		return nil, err
	}
	body := make([]byte, 0, 32+8*h.J)
	body = binary.BigEndian.AppendUint32(body, h.Map.A)
	body = binary.BigEndian.AppendUint32(body, uint32(h.Map.B))
	body = append(body, byte(h.K), byte(h.J))
	body = binary.BigEndian.AppendUint32(body, h.Cap)
	body = binary.BigEndian.AppendUint16(body, uint16(h.Ceiling))
	body = binary.BigEndian.AppendUint64(body, h.Survivors)
	if h.Joins {
		body = binary.BigEndian.AppendUint64(body, h.Joined)
	}
	for _, c := range h.ClosedAt {
		body = binary.BigEndian.AppendUint64(body, c)
	}
	body = binary.BigEndian.AppendUint32(body, uint32(len(h.Exceptions)))
	for _, e := range h.Exceptions {
		body = appendNat(body, e.N)
		body = append(body, byte(e.Fate))
		switch e.Fate {
		case Descends:
			body = binary.BigEndian.AppendUint32(body, e.Steps)
		case Cycle:
			body = appendNat(body, e.CycleMin)
		}
	}
	if len(body) > MaxHeaderBody {
		return nil, fmt.Errorf("header body of %d bytes exceeds %d", len(body), MaxHeaderBody)
	}
	kind := byte(KindSieve)
	if h.Joins {
		kind = KindJoins
	}
	return appendPreamble(nil, kind, h.Chunks, body), nil
}

func (h *SieveHeader) validate() error {
	if err := h.Map.Validate(); err != nil {
		return err
	}
	switch {
	case h.K < 1 || h.K > MaxK:
		return fmt.Errorf("k = %d: want 1 <= k <= %d", h.K, MaxK)
	case h.J < 1 || h.J > h.K:
		return fmt.Errorf("j = %d: want 1 <= j <= k = %d", h.J, h.K)
	case h.Cap < 1 || h.Cap > MaxCap:
		return fmt.Errorf("cap = %d: want 1 <= cap <= %d", h.Cap, MaxCap)
	case h.Ceiling < MinCeiling || h.Ceiling > MaxCeiling:
		return fmt.Errorf("ceiling W = %d bits: want %d to %d", h.Ceiling, MinCeiling, MaxCeiling)
	case len(h.ClosedAt) != h.J:
		return fmt.Errorf("%d closing counts for j = %d", len(h.ClosedAt), h.J)
	case h.Joins && (h.J != h.K || h.Joined > h.Survivors):
		return fmt.Errorf("a sieve with joins needs j = k and at most as many joined as survivors")
	case h.Chunks < 2 || h.Chunks > 1+1<<SplitDepth(h.J):
		return fmt.Errorf("%d chunks: a trie cut at depth %d has 2 to %d", h.Chunks, SplitDepth(h.J), 1+1<<SplitDepth(h.J))
	case len(h.Exceptions) > MaxExceptions:
		return fmt.Errorf("%d exceptions exceed %d", len(h.Exceptions), MaxExceptions)
	}
	for i, e := range h.Exceptions {
		if e.N == nil || e.N.Sign() <= 0 || natLen(e.N) > MaxNatBytes {
			return fmt.Errorf("exception %d: n must be a positive integer of at most %d bytes", i, MaxNatBytes)
		}
		if i > 0 && h.Exceptions[i-1].N.Cmp(e.N) >= 0 {
			return fmt.Errorf("exception %d: n = %v does not follow %v in increasing order", i, e.N, h.Exceptions[i-1].N)
		}
		switch e.Fate {
		case Descends:
			if e.Steps < 1 || e.Steps > h.Cap {
				return fmt.Errorf("exception n = %v: descends after %d steps, want 1 to cap = %d", e.N, e.Steps, h.Cap)
			}
		case Cycle:
			if e.CycleMin == nil || e.CycleMin.Cmp(e.N) < 0 || natLen(e.CycleMin) > MaxNatBytes {
				return fmt.Errorf("exception n = %v: a cycle's smallest member must be at least n", e.N)
			}
		case Undecided:
		default:
			return fmt.Errorf("exception n = %v: unknown fate %d", e.N, e.Fate)
		}
	}
	return nil
}

// ParseSieveHeader decodes a complete header (preamble and body) of kind 's'.
// It accepts only the canonical encoding.
func ParseSieveHeader(b []byte) (*SieveHeader, error) {
	p, err := parsePreamble(b)
	if err != nil {
		return nil, err
	}
	if p.kind != KindSieve && p.kind != KindJoins {
		return nil, formatErr(9, "kind %q is not a sieve certificate", p.kind)
	}
	if len(b) != PreambleSize+p.bodyLen {
		return nil, formatErr(int64(len(b)), "header is %d bytes, its length field says %d", len(b), PreambleSize+p.bodyLen)
	}
	d := decoder{buf: b, off: PreambleSize}
	h := &SieveHeader{Chunks: p.records}
	h.Map.A = d.u32("multiplier a")
	h.Map.B = int32(d.u32("constant b"))
	h.K = int(d.u8("k"))
	h.J = int(d.u8("j"))
	h.Cap = d.u32("step cap")
	h.Ceiling = int(d.u16("ceiling"))
	h.Survivors = d.u64("survivor count")
	if h.Joins = p.kind == KindJoins; h.Joins {
		h.Joined = d.u64("joined count")
	}
	if d.err == nil && (h.J < 1 || h.J > h.K || h.K > MaxK) {
		return nil, formatErr(PreambleSize+8, "k = %d, j = %d: want 1 <= j <= k <= %d", h.K, h.J, MaxK)
	}
	for t := 1; t <= h.J && d.err == nil; t++ {
		h.ClosedAt = append(h.ClosedAt, d.u64("closing count"))
	}
	nexc := d.u32("exception count")
	if d.err == nil && nexc > MaxExceptions {
		return nil, formatErr(int64(d.off-4), "%d exceptions exceed the cap of %d", nexc, MaxExceptions)
	}
	for i := uint32(0); i < nexc && d.err == nil; i++ {
		var e Exception
		e.N = d.nat("exception n")
		e.Fate = FateKind(d.u8("fate"))
		switch e.Fate {
		case Descends:
			e.Steps = d.u32("descent steps")
		case Cycle:
			e.CycleMin = d.nat("cycle minimum")
		case Undecided:
		default:
			if d.err == nil {
				d.err = formatErr(int64(d.off-1), "unknown fate %d", e.Fate)
			}
		}
		h.Exceptions = append(h.Exceptions, e)
	}
	if d.err != nil {
		return nil, d.err
	}
	if d.off != len(b) {
		return nil, formatErr(int64(d.off), "%d bytes after the last exception", len(b)-d.off)
	}
	if err := h.validate(); err != nil {
		return nil, formatErr(PreambleSize, "%v", err)
	}
	return h, nil
}

// Naturals (SPEC.md, "Integers"): one length byte L in 1..255, then L bytes
// big-endian, the first nonzero.
func appendNat(b []byte, x *big.Int) []byte {
	mag := x.Bytes()
	return append(append(b, byte(len(mag))), mag...)
}

func natLen(x *big.Int) int { return (x.BitLen() + 7) / 8 }

// decoder reads fixed-width big-endian fields and remembers the first error,
// which names the offset and the field.
type decoder struct {
	buf []byte
	off int
	err error
}

func (d *decoder) take(n int, field string) []byte {
	if d.err != nil {
		return nil
	}
	if len(d.buf)-d.off < n {
		d.err = formatErr(int64(d.off), "%s: want %d bytes, %d left", field, n, len(d.buf)-d.off)
		return nil
	}
	b := d.buf[d.off : d.off+n]
	d.off += n
	return b
}

func (d *decoder) u8(field string) uint8 {
	if b := d.take(1, field); b != nil {
		return b[0]
	}
	return 0
}

func (d *decoder) u16(field string) uint16 {
	if b := d.take(2, field); b != nil {
		return binary.BigEndian.Uint16(b)
	}
	return 0
}

func (d *decoder) u32(field string) uint32 {
	if b := d.take(4, field); b != nil {
		return binary.BigEndian.Uint32(b)
	}
	return 0
}

func (d *decoder) u64(field string) uint64 {
	if b := d.take(8, field); b != nil {
		return binary.BigEndian.Uint64(b)
	}
	return 0
}

func (d *decoder) nat(field string) *big.Int {
	start := d.off
	n := int(d.u8(field + " length"))
	if d.err == nil && n == 0 {
		d.err = formatErr(int64(start), "%s: length 0; a natural number here has 1 to %d bytes", field, MaxNatBytes)
	}
	b := d.take(n, field)
	if d.err != nil {
		return nil
	}
	if b[0] == 0 {
		d.err = formatErr(int64(start+1), "%s: leading zero byte (not canonical)", field)
		return nil
	}
	return new(big.Int).SetBytes(b)
}
