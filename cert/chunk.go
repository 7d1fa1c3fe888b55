package cert

import (
	"encoding/binary"
)

// Chunk is one record of a sieve certificate: the trie codes of one subtree.
// Record 0 is the top chunk (depths 0..D, Residue 0); record i >= 1 is the
// subtree below the i-th class open at depth D (depths D..J).
type Chunk struct {
	Residue  uint64 // the subtree's root class, Residue mod 2^From
	From, To int    // the depths of its root and of its leaves
	NBits    uint64
	Payload  []byte // ceil(NBits/8) bytes, zero padding
}

const chunkFixed = 14

// Marshal encodes the record.
func (c Chunk) Marshal() []byte {
	b := make([]byte, 0, chunkFixed+len(c.Payload))
	b = binary.BigEndian.AppendUint64(b, c.Residue)
	b = append(b, byte(c.From), byte(c.To))
	b = binary.BigEndian.AppendUint32(b, uint32(c.NBits))
	return append(b, c.Payload...)
}

// ParseChunk decodes a record; base is its file offset, for errors.
func ParseChunk(rec []byte, base int64) (Chunk, error) {
	if len(rec) < chunkFixed {
		return Chunk{}, formatErr(base, "chunk record of %d bytes is shorter than its %d-byte head", len(rec), chunkFixed)
	}
	c := Chunk{
		Residue: binary.BigEndian.Uint64(rec),
		From:    int(rec[8]),
		To:      int(rec[9]),
		NBits:   uint64(binary.BigEndian.Uint32(rec[10:])),
		Payload: rec[chunkFixed:],
	}
	if c.From > c.To || c.To > MaxK {
		return Chunk{}, formatErr(base+8, "chunk spans depths %d to %d", c.From, c.To)
	}
	if c.From < 64 && c.Residue>>c.From != 0 {
		return Chunk{}, formatErr(base, "chunk residue %d does not fit below 2^%d", c.Residue, c.From)
	}
	if want := (c.NBits + 7) / 8; uint64(len(c.Payload)) != want {
		return Chunk{}, formatErr(base+10, "%d code bits need %d bytes; the record holds %d", c.NBits, want, len(c.Payload))
	}
	if pad := c.NBits % 8; pad != 0 && c.Payload[len(c.Payload)-1]&(0xff>>pad) != 0 {
		return Chunk{}, formatErr(base+int64(len(rec))-1, "nonzero padding bits after the last code bit")
	}
	return c, nil
}

// Class is one leaf of the trie: the residue class Residue mod 2^Depth,
// either closed at step Depth or open there (a survivor when Depth = J, or
// a stub of the top chunk when Depth = D).
type Class struct {
	Residue uint64
	Depth   int
	Closed  bool
}

// Walk decodes the trie codes of c, calling fn for every leaf in
// depth-first order (the child with bit 0 at depth t first). It reads the
// codes as written and judges none of them; that is the checker's work.
// Codes that run out before depth c.To, or bits left over, are malformed.
func (c Chunk) Walk(fn func(Class) error) error {
	from, to := c.From, c.To
	r := bitReader{buf: c.Payload, nbit: c.NBits}
	var walk func(res uint64, t int) error
	walk = func(res uint64, t int) error {
		for t < to {
			x, ok := r.bit()
			if !ok {
				return formatErr(chunkFixed, "trie codes end at class %d mod 2^%d, above depth %d", res, t, to)
			}
			if x == 0 {
				if err := walk(res, t+1); err != nil {
					return err
				}
				res |= 1 << t
				t++
				continue
			}
			y, ok := r.bit()
			if !ok {
				return formatErr(chunkFixed, "trie codes end inside the code of class %d mod 2^%d", res, t)
			}
			if err := fn(Class{Residue: res | y<<t, Depth: t + 1, Closed: true}); err != nil {
				return err
			}
			res |= (1 - y) << t
			t++
		}
		return fn(Class{Residue: res, Depth: to})
	}
	if err := walk(c.Residue, from); err != nil {
		return err
	}
	if r.pos != c.NBits {
		return formatErr(chunkFixed, "%d code bits left after the last class", c.NBits-r.pos)
	}
	return nil
}
