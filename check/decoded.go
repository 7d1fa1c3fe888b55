package check

import "io"

// Decoded is this checker's reading of a certificate, with no judgement of
// its claims. It exists so that another decoder can be compared with this
// one, field by field.
type Decoded struct {
	Header     []byte
	Records    int
	Map        string
	K, J       int
	Cap        uint32
	Ceiling    int
	Survivors  uint64
	Joins      bool     // a sieve with joins
	Joined     uint64   // the joined survivors it claims
	ClosedAt   []uint64 // ClosedAt[t-1] for t = 1..J
	Exceptions []ExceptionReport
	Tree       [][][hashLen]byte
	Offsets    []int64
	Chunks     []DecodedChunk

	// A range certificate: the header's fields and the blocks.
	Range  *DecodedRange
	Blocks []DecodedBlock

	// A shard: which shard, and which records of the whole it holds; the
	// fields above are then the whole's.
	Shard *SpanReport
}

// DecodedRange is the header of a range certificate.
type DecodedRange struct {
	SieveRoot     [hashLen]byte
	From, To      string
	BlockExp      int
	Totals        DecodedSummary
	SieveK, Count int
	Rules         []string // each rule as "M*q+c <- M'*q+c' in i steps"
}

// DecodedSummary is a block's or the range's summary, numbers in decimal.
type DecodedSummary struct {
	Counts   [nCounts]string // sieve, join, search, small, cycle, undecided
	Sum      string
	MaxSigma uint32
	MaxAt    string
	Records  []RecordReport
	Cycles   []CycleReport
	Rules    []string // numbers justified by each rule, in decimal
}

// DecodedBlock is one block record.
type DecodedBlock struct {
	Index     uint32
	Summary   DecodedSummary
	Undecided []string
}

func decodedSummary(s *summary) DecodedSummary {
	d := DecodedSummary{Sum: s.sum.String(), MaxSigma: s.maxSigma}
	for i, c := range s.counts {
		d.Counts[i] = c.String()
	}
	if s.maxAt != nil {
		d.MaxAt = s.maxAt.String()
	}
	d.Records, _, d.Cycles = describeSummary(s)
	d.Rules = []string{}
	for _, c := range s.rules {
		d.Rules = append(d.Rules, c.String())
	}
	return d
}

// DecodedChunk is one chunk record and the leaves its codes describe.
type DecodedChunk struct {
	Residue uint64
	Bits    uint64
	Leaves  []DecodedClass
	// A sieve with joins: for each survivor of a chunk below the top, in
	// order, whether it is joined, and the deltas of the joined ones.
	Joined []bool
	Delta  []uint64
}

// DecodedClass is a leaf of the trie: Residue mod 2^Depth, closed at step
// Depth or open there.
type DecodedClass struct {
	Residue uint64
	Depth   int
	Closed  bool
}

// Decode reads a whole certificate and returns what it says. It fails on
// anything malformed, and checks no hash and no claim.
func Decode(r io.Reader) (*Decoded, error) {
	f, fl := openFile(r)
	if fl != nil {
		return nil, fl
	}
	base := 0 // the global index of the first record
	var shard *SpanReport
	if s := f.shard; s != nil {
		base, shard = s.first, &SpanReport{Index: s.index, Of: s.of, First: s.first, Count: s.count}
	}
	if f.rng != nil {
		d, err := decodeRange(f, base)
		if d != nil {
			d.Shard = shard
		}
		return d, err
	}
	rep := &Report{}
	rep.describe(f)
	d := &Decoded{Header: f.header, Records: f.records, Map: rep.Map, K: f.hdr.k, J: f.hdr.j, Cap: f.hdr.cap, Ceiling: f.hdr.ceiling,
		Survivors: f.hdr.survivors, Joins: f.hdr.joins, Joined: f.hdr.joined, ClosedAt: f.hdr.closedAt, Exceptions: rep.Exceptions, Tree: f.tree, Offsets: f.offsets, Shard: shard}
	for i := 0; ; i++ {
		rec, fl := f.record()
		if fl != nil {
			return nil, fl
		}
		if rec == nil {
			return d, nil
		}
		c, err := decodeChunk(rec, base+i, f.hdr, f.offsets[i])
		if err != nil {
			return nil, err
		}
		d.Chunks = append(d.Chunks, c)
	}
}

// decodeChunk reads the codes of chunk i by the grammar alone.
func decodeChunk(rec []byte, i int, h *sieveHeader, base int64) (DecodedChunk, *Failure) {
	sv := &sieve{h: h, j: h.j, d: splitDepth(h.j)} // no map: only the framing and the bits are used
	w, fl := sv.frame(i, rec, base)
	if fl == nil {
		fl = sv.depths(w)
	}
	if fl != nil {
		return DecodedChunk{}, fl
	}
	c := DecodedChunk{Residue: w.start, Bits: w.nbit}
	var leaves func(res uint64, t int) bool
	leaves = func(res uint64, t int) bool {
		for t < w.end {
			x, ok := w.bit()
			if !ok {
				return false
			}
			if x == 1 {
				y, ok := w.bit()
				if !ok {
					return false
				}
				c.Leaves = append(c.Leaves, DecodedClass{Residue: res | y<<t, Depth: t + 1, Closed: true})
				res |= (1 - y) << t
			} else {
				if !leaves(res, t+1) {
					return false
				}
				res |= 1 << t
			}
			t++
		}
		c.Leaves = append(c.Leaves, DecodedClass{Residue: res, Depth: w.end})
		return true
	}
	if !leaves(w.start, w.begin) || w.pos != w.nbit {
		return c, malformed(base+chunkHead, "chunk %d: the codes do not fit the trie grammar from depth %d to %d", i, w.begin, w.end)
	}
	if !h.joins {
		return c, nil
	}
	at := base + int64(len(rec)-len(w.rest))
	if i == 0 {
		if len(w.rest) > 0 {
			return c, malformed(at, "the top chunk has %d bytes after its codes; only chunks with survivors have joins", len(w.rest))
		}
		return c, nil
	}
	n := 0
	for _, l := range c.Leaves {
		if !l.Closed {
			n++
		}
	}
	if n > maxJoinSurvivors {
		return c, malformed(base, "chunk %d has %d survivors, more than the %d a chunk of a sieve with joins may hold", i, n, maxJoinSurvivors)
	}
	joined, deltas, fl := readJoins(w.rest, n, i, at)
	if fl != nil {
		return c, fl
	}
	c.Joined, c.Delta = joined, []uint64{}
	for x, d := range deltas {
		if joined[x] {
			c.Delta = append(c.Delta, d)
		}
	}
	return c, nil
}

func decodeRange(f *file, base int) (*Decoded, error) {
	h := f.rng
	d := &Decoded{Header: f.header, Records: f.records, Map: mapName(h.a, h.b), K: h.k, Cap: h.cap, Ceiling: h.ceiling, Tree: f.tree, Offsets: f.offsets,
		Range: &DecodedRange{SieveRoot: h.sieveRoot, From: h.lo.String(), To: h.hi.String(), BlockExp: h.e, Totals: decodedSummary(&h.tot),
			SieveK: h.k, Count: h.blocks(), Rules: []string{}}}
	for _, r := range h.rules {
		d.Range.Rules = append(d.Range.Rules, r.String())
	}
	for i := 0; ; i++ {
		rec, fl := f.record()
		if fl != nil {
			return nil, fl
		}
		if rec == nil {
			return d, nil
		}
		b, fl := parseBlock(rec, f.offsets[i], len(h.rules))
		if fl != nil {
			return nil, fl
		}
		if b.index != uint32(base+i) {
			return nil, malformed(f.offsets[i], "record %d says it is block %d", base+i, b.index)
		}
		db := DecodedBlock{Index: b.index, Summary: decodedSummary(&b.sum), Undecided: []string{}}
		for _, n := range b.undecided {
			db.Undecided = append(db.Undecided, n.String())
		}
		d.Blocks = append(d.Blocks, db)
	}
}
