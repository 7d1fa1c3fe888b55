package check

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"io"
	"math/big"
)

// This decoder is written from cert/SPEC.md alone; it shares no code with
// the encoder, so that a misreading of the format in one shows up as a
// disagreement with the other.

const (
	magic       = "descent\x00"
	version     = 2
	kindSieve   = 's'
	kindJoins   = 'j' // a sieve with joins
	kindRange   = 'r'
	kindShard   = 'h'
	preambleLen = 18
	hashLen     = 32

	// Caps from the format: each bounds an allocation or a loop the input
	// steers.
	maxBody      = 1 << 20
	maxRecords   = 1 << 24
	maxRecordLen = 1 << 30
	maxExc       = 1 << 16
	maxCap       = 1 << 24
	maxNat       = 255
	maxK         = 64
	chunkHead    = 14
	minCeiling   = 128
	maxCeiling   = 8192
)

type exception struct {
	n        *big.Int
	fate     byte // 1 descends, 2 cycle, 3 undecided
	steps    uint32
	cycleMin *big.Int
}

type sieveHeader struct {
	a         uint32
	b         int32
	k, j      int
	cap       uint32
	ceiling   int // W: following an orbit stops, undecided, at an iterate of 2^W or more
	survivors uint64
	joins     bool     // a sieve with joins (kind 'j')
	joined    uint64   // its joined survivors
	closedAt  []uint64 // closedAt[t-1] for t = 1..j
	exc       []exception
}

// file reads a certificate front to back.
type file struct {
	src     io.Reader
	off     int64
	header  []byte // preamble and body: leaf 0
	records int
	hdr     *sieveHeader // a sieve certificate, or
	rng     *rangeHeader // a range certificate; either may be
	shard   *shardHeader // the whole of which this file is a shard
	tree    [][][hashLen]byte
	offsets []int64
	next    int
}

func (f *file) read(n int64, what string) ([]byte, *Failure) {
	var buf bytes.Buffer
	// Copy grows the buffer as bytes arrive: a length that claims more
	// than the input holds allocates no more than the input.
	got, err := io.CopyN(&buf, f.src, n)
	f.off += got
	if got < n {
		if err != nil && err != io.EOF {
			return nil, malformed(f.off, "read: %v", err)
		}
		return nil, malformed(f.off, "file ends inside the %s (%d of %d bytes)", what, got, n)
	}
	return buf.Bytes(), nil
}

func openFile(r io.Reader) (*file, *Failure) {
	f := &file{src: r}
	if fl := f.readHeader(); fl != nil {
		return f, fl
	}
	return f, f.readIndex()
}

// readHeader reads and parses the preamble and the header body.
func (f *file) readHeader() *Failure {
	pre, fl := f.read(preambleLen, "preamble")
	if fl != nil {
		return fl
	}
	if string(pre[:8]) != magic {
		return malformed(0, "not a descent certificate (the first 8 bytes are %q)", pre[:8])
	}
	if pre[8] != version {
		return versionFailure(pre[8])
	}
	if pre[9] != kindSieve && pre[9] != kindJoins && pre[9] != kindRange && pre[9] != kindShard {
		return malformed(9, "unknown certificate kind %q", pre[9])
	}
	records := binary.BigEndian.Uint32(pre[10:])
	if records < 1 || records > maxRecords {
		return malformed(10, "the preamble declares %d records; the format allows 1 to %d", records, maxRecords)
	}
	bodyLen := binary.BigEndian.Uint32(pre[14:])
	if bodyLen > maxBody {
		return malformed(14, "header body of %d bytes is over the cap of %d", bodyLen, maxBody)
	}
	body, fl := f.read(int64(bodyLen), "header")
	if fl != nil {
		return fl
	}
	f.header = append(pre, body...)
	f.records = int(records)
	if pre[9] == kindShard {
		if f.shard, fl = parseShardHeader(body, f.records); fl != nil {
			return fl
		}
		f.hdr, f.rng = f.shard.hdr, f.shard.rng
	} else if pre[9] == kindRange {
		if f.rng, fl = parseRangeHeader(body, f.records); fl != nil {
			return fl
		}
	} else {
		if f.hdr, fl = parseSieveHeader(body, pre[9] == kindJoins); fl != nil {
			return fl
		}
		if fl := f.hdr.sane(f.records); fl != nil {
			return fl
		}
	}

	return nil
}

// readIndex reads the stored tree and the record offsets.
func (f *file) readIndex() *Failure {
	for level, size := range levelSizes(f.records + 1) {
		b, fl := f.read(int64(size)*hashLen, fmt.Sprintf("stored tree, level %d", level))
		if fl != nil {
			return fl
		}
		hs := make([][hashLen]byte, size)
		for i := range hs {
			copy(hs[i][:], b[i*hashLen:])
		}
		f.tree = append(f.tree, hs)
	}
	b, fl := f.read(8*int64(f.records+1), "record offsets")
	if fl != nil {
		return fl
	}
	start := f.off
	for i := 0; i <= f.records; i++ {
		off := int64(binary.BigEndian.Uint64(b[8*i:]))
		at := start - int64(len(b)) + 8*int64(i)
		if i == 0 && off != start {
			return malformed(at, "the first record is said to start at %d; it starts at %d", off, start)
		}
		if i > 0 {
			prev := f.offsets[i-1]
			if off <= prev || off-prev > maxRecordLen {
				return malformed(at, "record %d would span offsets %d to %d", i-1, prev, off)
			}
		}
		f.offsets = append(f.offsets, off)
	}
	return nil
}

// record returns the next record, or nil at the end once it has made sure
// nothing follows the last one.
func (f *file) record() ([]byte, *Failure) {
	if f.next == f.records {
		var one [1]byte
		if n, _ := io.ReadFull(f.src, one[:]); n > 0 {
			return nil, malformed(f.off, "bytes follow the last record")
		}
		return nil, nil
	}
	rec, fl := f.read(f.offsets[f.next+1]-f.offsets[f.next], fmt.Sprintf("record %d", f.next))
	f.next++
	return rec, fl
}

// splitDepth is where the trie is cut into chunks: min(floor(j/2), 23).
func splitDepth(j int) int { return min(j/2, 23) }

func levelSizes(n int) []int {
	sizes := []int{n}
	for n > 1 {
		n = (n + 1) / 2
		sizes = append(sizes, n)
	}
	return sizes
}

// fields reads big-endian fields of a header body; offsets in its errors
// count from the start of the file.
type fields struct {
	b   []byte
	pos int
	bad *Failure
}

func (p *fields) next(n int, what string) []byte {
	if p.bad != nil {
		return nil
	}
	if len(p.b)-p.pos < n {
		p.bad = malformed(int64(preambleLen+p.pos), "the header ends inside the %s", what)
		return nil
	}
	out := p.b[p.pos : p.pos+n]
	p.pos += n
	return out
}

func (p *fields) byte1(what string) byte {
	if b := p.next(1, what); b != nil {
		return b[0]
	}
	return 0
}

func (p *fields) int16be(what string) uint16 {
	if b := p.next(2, what); b != nil {
		return binary.BigEndian.Uint16(b)
	}
	return 0
}

func (p *fields) int32be(what string) uint32 {
	if b := p.next(4, what); b != nil {
		return binary.BigEndian.Uint32(b)
	}
	return 0
}

func (p *fields) int64be(what string) uint64 {
	if b := p.next(8, what); b != nil {
		return binary.BigEndian.Uint64(b)
	}
	return 0
}

func (p *fields) natural(what string) *big.Int {
	at := preambleLen + p.pos
	n := int(p.byte1(what))
	if p.bad == nil && n == 0 {
		p.bad = malformed(int64(at), "%s has length 0", what)
	}
	b := p.next(n, what)
	if p.bad != nil {
		return nil
	}
	if b[0] == 0 {
		p.bad = malformed(int64(at+1), "%s starts with a zero byte, which is not canonical", what)
		return nil
	}
	return new(big.Int).SetBytes(b)
}

func parseSieveHeader(body []byte, joins bool) (*sieveHeader, *Failure) {
	p := &fields{b: body}
	h := &sieveHeader{}
	h.a = p.int32be("multiplier")
	h.b = int32(p.int32be("constant"))
	h.k = int(p.byte1("k"))
	h.j = int(p.byte1("j"))
	h.cap = p.int32be("step cap")
	h.ceiling = int(p.int16be("ceiling"))
	h.survivors = p.int64be("survivor count")
	if h.joins = joins; joins {
		h.joined = p.int64be("joined count")
	}
	if p.bad == nil && (h.k < 1 || h.k > maxK || h.j < 1 || h.j > h.k) {
		return nil, malformed(preambleLen+8, "k = %d and j = %d: the format needs 1 <= j <= k <= %d", h.k, h.j, maxK)
	}
	for t := 0; t < h.j && p.bad == nil; t++ {
		h.closedAt = append(h.closedAt, p.int64be("closing counts"))
	}
	count := p.int32be("exception count")
	if p.bad == nil && count > maxExc {
		return nil, malformed(int64(preambleLen+p.pos-4), "%d exceptions; the format allows %d", count, maxExc)
	}
	for i := uint32(0); i < count && p.bad == nil; i++ {
		at := preambleLen + p.pos
		e := exception{n: p.natural("exception")}
		e.fate = p.byte1("fate")
		switch e.fate {
		case 1:
			e.steps = p.int32be("steps")
		case 2:
			e.cycleMin = p.natural("cycle minimum")
		case 3:
		default:
			if p.bad == nil {
				p.bad = malformed(int64(at), "exception %d has fate %d; fates are 1, 2 and 3", i, e.fate)
			}
		}
		h.exc = append(h.exc, e)
	}
	if p.bad != nil {
		return nil, p.bad
	}
	if p.pos != len(body) {
		return nil, malformed(int64(preambleLen+p.pos), "%d bytes follow the last exception inside the header", len(body)-p.pos)
	}
	return h, nil
}

// sane applies the format's rules on values (SPEC.md, "Sieve header").
func (h *sieveHeader) sane(records int) *Failure {
	const at = preambleLen
	switch {
	case h.a < 3 || h.a%2 == 0:
		return malformed(at, "multiplier %d: the format needs an odd a >= 3", h.a)
	case h.b%2 == 0 || int64(h.b) <= -int64(h.a):
		return malformed(at+4, "constant %d: the format needs an odd b > -a", h.b)
	case h.cap < 1 || h.cap > maxCap:
		return malformed(at+10, "step cap %d: the format allows 1 to %d", h.cap, maxCap)
	case h.ceiling < minCeiling || h.ceiling > maxCeiling:
		return malformed(at+14, "ceiling %d bits: the format allows %d to %d", h.ceiling, minCeiling, maxCeiling)
	case h.joins && h.j != h.k:
		return malformed(at+9, "a sieve with joins needs j = k; this one has j = %d, k = %d", h.j, h.k)
	case h.joins && h.joined > h.survivors:
		return malformed(at+24, "a sieve with joins claims %d joined of its %d survivors", h.joined, h.survivors)
	case records < 2 || records-1 > 1<<splitDepth(h.j):
		return malformed(10, "%d records: a trie cut at depth %d has 1 to %d classes below the top", records, splitDepth(h.j), 1<<splitDepth(h.j))
	}
	for i, e := range h.exc {
		if i > 0 && h.exc[i-1].n.Cmp(e.n) >= 0 {
			return malformed(at, "exception %v is out of increasing order", e.n)
		}
		switch {
		case e.fate == 1 && (e.steps < 1 || e.steps > h.cap):
			return malformed(at, "exception %v descends after %d steps; the cap is %d", e.n, e.steps, h.cap)
		case e.fate == 2 && e.cycleMin.Cmp(e.n) < 0:
			return malformed(at, "exception %v reaches a cycle whose smallest member %v is below it", e.n, e.cycleMin)
		}
	}
	return nil
}

// versionFailure reports a file of another format version: malformed for
// this checker, with the remedy for an older one.
func versionFailure(v byte) *Failure {
	off := int64(8)
	fl := &Failure{Class: ErrMalformed, Reason: ReasonVersion, Where: Where{Offset: &off}}
	if v < version {
		fl.Msg = fmt.Sprintf("format version %d is an older format that this checker no longer reads (it reads version %d)", v, version)
		fl.Hint = "re-emit the certificate with this version of descent"
	} else {
		fl.Msg = fmt.Sprintf("unknown format version %d; this checker reads version %d", v, version)
	}
	return fl
}

func mapName(a uint32, b int32) string {
	if b < 0 {
		return fmt.Sprintf("%dn%d", a, b)
	}
	return fmt.Sprintf("%dn+%d", a, b)
}

// shardHeader is a shard's header: shard index of of, the whole's records
// [first, first+count), and the whole's header (for a range, with totals
// zero).
type shardHeader struct {
	whole        byte
	index, of    int
	first, count int
	wholeHeader  []byte
	wholeRecords int
	hdr          *sieveHeader
	rng          *rangeHeader
}

func parseShardHeader(body []byte, records int) (*shardHeader, *Failure) {
	p := &fields{b: body}
	h := &shardHeader{whole: p.byte1("whole kind")}
	h.index = int(p.int32be("shard index"))
	h.of = int(p.int32be("shard count"))
	h.first = int(p.int32be("first record"))
	h.count = int(p.int32be("record count"))
	n := int(p.int32be("whole header length"))
	h.wholeHeader = p.next(n, "whole header")
	if p.bad != nil {
		return nil, p.bad
	}
	if p.pos != len(body) {
		return nil, malformed(int64(preambleLen+p.pos), "%d bytes follow the whole's header", len(body)-p.pos)
	}
	w := h.wholeHeader
	if len(w) < preambleLen || string(w[:8]) != magic || w[8] != version || (w[9] != kindSieve && w[9] != kindJoins && w[9] != kindRange) || w[9] != h.whole {
		return nil, malformed(preambleLen+21, "the whole's header is not a sieve or range header of the kind the shard names")
	}
	h.wholeRecords = int(binary.BigEndian.Uint32(w[10:]))
	wb := w[preambleLen:]
	if int(binary.BigEndian.Uint32(w[14:])) != len(wb) {
		return nil, malformed(preambleLen+21, "the whole's header is cut")
	}
	if h.of < 1 || h.of > h.wholeRecords || h.index < 0 || h.index >= h.of {
		return nil, malformed(preambleLen+1, "shard %d of %d of a whole of %d records", h.index, h.of, h.wholeRecords)
	}
	// Shard i of n holds the whole's records [floor(i*R/n), floor((i+1)*R/n)).
	first := int(int64(h.index) * int64(h.wholeRecords) / int64(h.of))
	last := int(int64(h.index+1) * int64(h.wholeRecords) / int64(h.of))
	switch {
	case h.first != first || h.count != last-first || h.count != records:
		return nil, malformed(preambleLen+9, "shard %d of %d must hold records %d to %d, one per record of the file", h.index, h.of, first, last-1)
	}
	var fl *Failure
	if h.whole == kindSieve || h.whole == kindJoins {
		if h.hdr, fl = parseSieveHeader(wb, h.whole == kindJoins); fl == nil {
			fl = h.hdr.sane(h.wholeRecords)
		}
	} else {
		h.rng, fl = parseRangeHeader(wb, h.wholeRecords)
	}
	if fl != nil {
		return nil, fl
	}
	return h, nil
}
