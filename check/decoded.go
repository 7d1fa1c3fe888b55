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
	Survivors  uint64
	ClosedAt   []uint64 // ClosedAt[t-1] for t = 1..J
	Exceptions []ExceptionReport
	Tree       [][][hashLen]byte
	Offsets    []int64
	Chunks     []DecodedChunk
}

// DecodedChunk is one chunk record and the leaves its codes describe.
type DecodedChunk struct {
	Residue uint64
	Bits    uint64
	Leaves  []DecodedClass
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
	rep := &Report{}
	rep.describe(f)
	d := &Decoded{Header: f.header, Records: f.records, Map: rep.Map, K: f.hdr.k, J: f.hdr.j, Cap: f.hdr.cap,
		Survivors: f.hdr.survivors, ClosedAt: f.hdr.closedAt, Exceptions: rep.Exceptions, Tree: f.tree, Offsets: f.offsets}
	for i := 0; ; i++ {
		rec, fl := f.record()
		if fl != nil {
			return nil, fl
		}
		if rec == nil {
			return d, nil
		}
		c, err := decodeChunk(rec, i, f.hdr.j, f.offsets[i])
		if err != nil {
			return nil, err
		}
		d.Chunks = append(d.Chunks, c)
	}
}

// decodeChunk reads the codes of chunk i by the grammar alone.
func decodeChunk(rec []byte, i, j int, base int64) (DecodedChunk, *Failure) {
	sv := &sieve{j: j, d: splitDepth(j)} // no map: only the framing and the bits are used
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
	return c, nil
}
