package cert

import "encoding/binary"

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
	c, rest, err := parseChunk(rec, base)
	if err == nil && len(rest) != 0 {
		err = formatErr(base+int64(len(rec)-len(rest)), "%d bytes after the codes", len(rest))
	}
	return c, err
}

// ParseChunkJoins decodes a record of a sieve with joins: the chunk and the
// bytes after its codes, its join section (empty for the top chunk).
func ParseChunkJoins(rec []byte, base int64) (Chunk, []byte, error) {
	return parseChunk(rec, base)
}

func parseChunk(rec []byte, base int64) (Chunk, []byte, error) {
	if len(rec) < chunkFixed {
		return Chunk{}, nil, formatErr(base, "chunk record of %d bytes is shorter than its %d-byte head", len(rec), chunkFixed)
	}
	c := Chunk{
		Residue: binary.BigEndian.Uint64(rec),
		From:    int(rec[8]),
		To:      int(rec[9]),
		NBits:   uint64(binary.BigEndian.Uint32(rec[10:])),
		Payload: rec[chunkFixed:],
	}
	if c.From > c.To || c.To > MaxK {
		return Chunk{}, nil, formatErr(base+8, "chunk spans depths %d to %d", c.From, c.To)
	}
	if c.From < 64 && c.Residue>>c.From != 0 {
		return Chunk{}, nil, formatErr(base, "chunk residue %d does not fit below 2^%d", c.Residue, c.From)
	}
	want := (c.NBits + 7) / 8
	if uint64(len(c.Payload)) < want {
		return Chunk{}, nil, formatErr(base+10, "%d code bits need %d bytes; the record holds %d", c.NBits, want, len(c.Payload))
	}
	rest := c.Payload[want:]
	c.Payload = c.Payload[:want]
	if pad := c.NBits % 8; pad != 0 && c.Payload[len(c.Payload)-1]&(0xff>>pad) != 0 {
		return Chunk{}, nil, formatErr(base+chunkFixed+int64(want)-1, "nonzero padding bits after the last code bit")
	}
	return c, rest, nil
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

// Open counts the chunk's open leaves: its stubs (the top chunk) or its
// survivors, the number of join codes its join section holds.
func (c Chunk) Open() (int, error) {
	n := 0
	err := c.Walk(func(cl Class) error {
		if !cl.Closed {
			n++
		}
		return nil
	})
	return n, err
}

// Joins is the join section of a chunk of a sieve with joins (SPEC.md,
// section 8): for each survivor of the chunk, in the order of the codes,
// whether it is joined, and if so Delta = r - r' for its partner r'.
type Joins struct {
	Joined []bool
	Delta  []uint64 // one per joined survivor, in order, each at least 1
}

// The join codes, one per survivor, most significant bit first:
//
//	0    not joined
//	10   joined to r - 1
//	11   joined to r - delta, delta = 2 + the next varint after the codes
//
// The codes are padded with zero bits to a whole byte; the varints follow,
// unsigned, shortest form, each at most MaxJoinVarint. Every partner has
// exactly one encoding, and every encoding names a partner below r or
// claims one below zero, which is false (a checker's reason "join"), not
// malformed.

// MaxJoinVarint is the largest varint value of a join delta, so that
// delta = 2 + value fits in 64 bits.
const MaxJoinVarint = 1<<64 - 3

// MaxJoinSurvivors bounds the survivors of one chunk of a sieve with
// joins, whose checker keeps them while it reads the join section.
const MaxJoinSurvivors = 1 << 22

// JoinWriter builds a join section survivor by survivor, for writers
// that would rather not hold a Joins.
type JoinWriter struct {
	codes  BitWriter
	deltas []byte
	joined uint64
}

// Keep records a survivor that is not joined.
func (w *JoinWriter) Keep() { w.codes.WriteBits(0, 1) }

// Keeps records n survivors that are not joined.
func (w *JoinWriter) Keeps(n uint64) {
	for ; n >= 64; n -= 64 {
		w.codes.WriteBits(0, 64)
	}
	w.codes.WriteBits(0, uint(n))
}

// Join records a survivor joined to the residue delta >= 1 below it.
func (w *JoinWriter) Join(delta uint64) {
	w.joined++
	if delta == 1 {
		w.codes.WriteBits(0b10, 2)
		return
	}
	w.codes.WriteBits(0b11, 2)
	w.deltas = binary.AppendUvarint(w.deltas, delta-2)
}

// Neighbours records n survivors, each joined to the residue just below.
func (w *JoinWriter) Neighbours(n uint64) {
	w.joined += n
	const tens = 0xaaaaaaaaaaaaaaaa // 32 codes 10
	for ; n >= 32; n -= 32 {
		w.codes.WriteBits(tens, 64)
	}
	w.codes.WriteBits(tens, uint(2*n))
}

// Joined is the number of joined survivors recorded.
func (w *JoinWriter) Joined() uint64 { return w.joined }

// AppendTo appends the section to b: the same bytes as AppendJoins.
func (w *JoinWriter) AppendTo(b []byte) []byte {
	return append(append(b, w.codes.Bytes()...), w.deltas...)
}

// AppendJoins encodes a join section.
func AppendJoins(b []byte, j Joins) []byte {
	var w JoinWriter
	d := 0
	for _, x := range j.Joined {
		if !x {
			w.Keep()
			continue
		}
		w.Join(j.Delta[d])
		d++
	}
	return w.AppendTo(b)
}

// ParseJoins decodes the join section of a chunk with survivors survivors
// from rest, the bytes after the codes, which it must use exactly; base is
// its file offset, for errors.
func ParseJoins(rest []byte, survivors int, base int64) (Joins, error) {
	j := Joins{Joined: []bool{}, Delta: []uint64{}}
	if survivors > MaxJoinSurvivors {
		return j, formatErr(base, "a chunk of a sieve with joins holds %d survivors, more than %d", survivors, MaxJoinSurvivors)
	}
	if need := (survivors + 7) / 8; len(rest) < need {
		return j, formatErr(base, "the join codes of %d survivors need at least %d bytes; the section has %d", survivors, need, len(rest))
	}
	r := bitReader{buf: rest, nbit: uint64(len(rest)) * 8}
	var explicit []int // the places in Delta that a varint fills
	for range survivors {
		x, ok := r.bit()
		if !ok {
			return j, formatErr(base, "the join codes of %d survivors run past the %d bytes of the section", survivors, len(rest))
		}
		if x == 0 {
			j.Joined = append(j.Joined, false)
			continue
		}
		y, ok := r.bit()
		if !ok {
			return j, formatErr(base, "the join codes of %d survivors run past the %d bytes of the section", survivors, len(rest))
		}
		j.Joined = append(j.Joined, true)
		if y == 1 {
			explicit = append(explicit, len(j.Delta))
		}
		j.Delta = append(j.Delta, 1)
	}
	nb := (r.pos + 7) / 8
	if pad := r.pos % 8; pad != 0 && rest[nb-1]&(0xff>>pad) != 0 {
		return j, formatErr(base+int64(nb-1), "nonzero padding after the join codes")
	}
	rest, base = rest[nb:], base+int64(nb)
	for _, at := range explicit {
		v, n := binary.Uvarint(rest)
		if n <= 0 || n != len(binary.AppendUvarint(nil, v)) || v > MaxJoinVarint {
			return j, formatErr(base, "a join delta is not a shortest-form varint of at most %d", uint64(MaxJoinVarint))
		}
		j.Delta[at] = v + 2
		rest, base = rest[n:], base+int64(n)
	}
	if len(rest) != 0 {
		return j, formatErr(base, "%d bytes after the join deltas", len(rest))
	}
	return j, nil
}
