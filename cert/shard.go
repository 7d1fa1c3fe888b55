package cert

import (
	"encoding/binary"
	"fmt"
)

// KindShard is one shard of a certificate computed in N pieces: the
// records [First, First+Count) of the whole, which merge puts together.
const KindShard = 'h'

// ShardHeader is the kind 'h' header.
type ShardHeader struct {
	Whole        byte   // the kind of the whole certificate: KindSieve, KindJoins, KindRange or KindCensus
	Index, Of    int    // shard Index of Of (0 <= Index < Of)
	First, Count int    // the global records it holds
	WholeHeader  []byte // the whole's header; for a range or a census, with totals zero
}

// ShardSpan gives the records of shard i of n over r records: the
// contiguous run [floor(i*r/n), floor((i+1)*r/n)). Every record is in
// exactly one shard, in order, and no shard is empty when n <= r.
func ShardSpan(i, n, r int) (first, count int) {
	a := int(int64(i) * int64(r) / int64(n))
	b := int(int64(i+1) * int64(r) / int64(n))
	return a, b - a
}

// Marshal returns the complete header of a shard.
func (h *ShardHeader) Marshal() ([]byte, error) {
	if err := h.validate(); err != nil {
		return nil, err
	}
	body := []byte{h.Whole}
	for _, v := range []int{h.Index, h.Of, h.First, h.Count, len(h.WholeHeader)} {
		body = binary.BigEndian.AppendUint32(body, uint32(v))
	}
	body = append(body, h.WholeHeader...)
	return appendPreamble(nil, KindShard, h.Count, body), nil
}

func (h *ShardHeader) validate() error {
	p, err := parsePreamble(h.WholeHeader)
	if err != nil {
		return fmt.Errorf("shard: the whole's header: %v", err)
	}
	switch {
	case p.kind != h.Whole || (h.Whole != KindSieve && h.Whole != KindJoins && h.Whole != KindRange && h.Whole != KindCensus):
		return fmt.Errorf("shard: a whole of kind %q with a header of kind %q", h.Whole, p.kind)
	case len(h.WholeHeader) != PreambleSize+p.bodyLen:
		return fmt.Errorf("shard: the whole's header is cut")
	case h.Of < 1 || h.Of > p.records || h.Index < 0 || h.Index >= h.Of:
		return fmt.Errorf("shard %d of %d: want 0 <= i < n <= %d records", h.Index, h.Of, p.records)
	}
	if f, c := ShardSpan(h.Index, h.Of, p.records); f != h.First || c != h.Count {
		return fmt.Errorf("shard %d of %d holds records %d..%d, not %d..%d", h.Index, h.Of, f, f+c-1, h.First, h.First+h.Count-1)
	}
	return nil
}

// ParseShardHeader decodes a complete header of kind 'h'.
func ParseShardHeader(b []byte) (*ShardHeader, error) {
	p, err := parsePreamble(b)
	if err != nil {
		return nil, err
	}
	if p.kind != KindShard {
		return nil, formatErr(9, "kind %q is not a shard", p.kind)
	}
	if len(b) != PreambleSize+p.bodyLen {
		return nil, formatErr(int64(len(b)), "header is %d bytes, its length field says %d", len(b), PreambleSize+p.bodyLen)
	}
	d := decoder{buf: b, off: PreambleSize}
	h := &ShardHeader{Whole: d.u8("whole kind")}
	h.Index = int(d.u32("shard index"))
	h.Of = int(d.u32("shard count"))
	h.First = int(d.u32("first record"))
	h.Count = int(d.u32("record count"))
	n := int(d.u32("whole header length"))
	h.WholeHeader = d.take(n, "whole header")
	if d.err != nil {
		return nil, d.err
	}
	if d.off != len(b) {
		return nil, formatErr(int64(d.off), "%d bytes after the whole's header", len(b)-d.off)
	}
	if h.Count != p.records {
		return nil, formatErr(10, "the preamble declares %d records, the shard %d", p.records, h.Count)
	}
	if err := h.validate(); err != nil {
		return nil, formatErr(PreambleSize, "%v", err)
	}
	switch h.Whole {
	case KindSieve, KindJoins:
		_, err = ParseSieveHeader(h.WholeHeader)
	case KindRange:
		_, err = ParseRangeHeader(h.WholeHeader)
	case KindCensus:
		_, err = ParseCensusHeader(h.WholeHeader)
	}
	if err != nil {
		return nil, formatErr(PreambleSize+21, "the whole's header: %v", err)
	}
	return h, nil
}
