package kernel

import (
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"io"
	"sync/atomic"

	"golang.org/x/crypto/blake2b"
)

// The container (SPEC.md, section 2) read at offsets, with the Merkle tree
// of its header and records.

// Caps of the format (SPEC.md, section 4): each bounds a loop or an
// allocation that the input steers.
const preambleLen, maxBody, maxRecords, maxRecordLen = 18, 1 << 20, 1 << 24, 1 << 30

// Hash is a BLAKE2b-256 hash: a leaf, an inner node or a root.
type Hash [32]byte

func (h Hash) String() string { return hex.EncodeToString(h[:]) }

func (h Hash) short() string { return hex.EncodeToString(h[:8]) + "…" }

// LeafHash and nodeHash have different first bytes, so that no record can
// pass for an inner node (SPEC.md, "Hashes").
func LeafHash(b []byte) (h Hash) {
	d, _ := blake2b.New256(nil)
	d.Write([]byte{0})
	d.Write(b)
	return Hash(d.Sum(nil))
}

func nodeHash(l, r Hash) Hash { return blake2b.Sum256(append(append([]byte{1}, l[:]...), r[:]...)) }

// levelSizes are the sizes of the tree's levels over n leaves: each level
// pairs the one below from the left, an unpaired last hash moving up.
func levelSizes(n int) []int {
	sizes := []int{n}
	for n > 1 {
		n = (n + 1) / 2
		sizes = append(sizes, n)
	}
	return sizes
}

// File is a certificate opened for reading at offsets: its header, and,
// once read, its stored tree and record offsets. In a part check (root
// set) neither is read: each record is read with its own two offsets and
// its audit path to the given root.
type File struct {
	Kind    byte // 's', 'j', 'r' or 'h'
	Records int
	Header  []byte       // preamble and body: leaf 0
	Sieve   *SieveHeader // a sieve, or the whole of a sieve shard
	Range   *RangeHeader // a range, or the whole of a range shard
	Shard   *ShardHeader
	Tree    [][]Hash // the stored tree, level 0 first
	Offsets []int64
	read    atomic.Int64 // the bytes read so far
	src     io.ReaderAt
	size    int64
	root    *Hash // a part check: the given root
}

// readAt reads n bytes at off, allocating only once they are known to lie
// in the file: no length the input states is allocated ahead of its bytes.
func (f *File) readAt(off, n int64, what string) ([]byte, *Failure) {
	if off < 0 || n < 0 || off > f.size || n > f.size-off {
		off = min(max(off, 0), f.size)
		return nil, malformed(f.size, "file ends inside the %s (%d of %d bytes)", what, f.size-off, n)
	}
	b := make([]byte, n)
	got, err := f.src.ReadAt(b, off)
	f.read.Add(int64(got))
	if got < len(b) {
		return nil, malformed(off+int64(got), "read: %v", err)
	}
	return b, nil
}

// open reads the preamble and the header (SPEC.md, section 3, steps 1
// and 2).
func open(r io.ReaderAt, size int64) (*File, *Failure) {
	f := &File{src: r, size: size}
	pre, fl := f.readAt(0, preambleLen, "preamble")
	if fl != nil {
		return f, fl
	}
	switch {
	case string(pre[:8]) != magic:
		return f, malformed(0, "not a descent certificate (the first 8 bytes are %q)", pre[:8])
	case pre[8] != version:
		fl = malformed(8, "unknown format version %d; this checker reads version %d", pre[8], version)
		if fl.Reason = ReasonVersion; pre[8] < version {
			fl.Msg = fmt.Sprintf("format version %d is an older format that this checker no longer reads (it reads version %d)", pre[8], version)
			fl.Hint = "re-emit the certificate with this version of descent"
		}
		return f, fl
	case pre[9] != kindSieve && pre[9] != kindJoins && pre[9] != kindRange && pre[9] != kindShard:
		return f, malformed(9, "unknown certificate kind %q", pre[9])
	}
	records, bodyLen := binary.BigEndian.Uint32(pre[10:]), binary.BigEndian.Uint32(pre[14:])
	if records < 1 || records > maxRecords {
		return f, malformed(10, "the preamble declares %d records; the format allows 1 to %d", records, maxRecords)
	} else if bodyLen > maxBody {
		return f, malformed(14, "header body of %d bytes is over the cap of %d", bodyLen, maxBody)
	}
	body, fl := f.readAt(preambleLen, int64(bodyLen), "header")
	if fl != nil {
		return f, fl
	}
	f.Kind, f.Records, f.Header = pre[9], int(records), append(pre, body...)
	switch f.Kind {
	case kindShard:
		if f.Shard, fl = parseShardHeader(body, f.Records); fl == nil {
			f.Sieve, f.Range = f.Shard.sieve, f.Shard.rng
		}
	case kindRange:
		f.Range, fl = parseRangeHeader(body, f.Records)
	default:
		f.Sieve, fl = parseSieveHeader(body, f.Kind == kindJoins, f.Records)
	}
	return f, fl
}

// index is the offset of the record offsets, after the stored tree.
func (f *File) index() int64 {
	n := int64(len(f.Header))
	for _, s := range levelSizes(f.Records + 1) {
		n += int64(s) * 32
	}
	return n
}

// readIndex reads the stored tree and the offsets (step 3).
func (f *File) readIndex() *Failure {
	off := int64(len(f.Header))
	for level, size := range levelSizes(f.Records + 1) {
		b, fl := f.readAt(off, int64(size)*32, fmt.Sprintf("stored tree, level %d", level))
		if fl != nil {
			return fl
		}
		off += int64(len(b))
		hs := make([]Hash, size)
		for i := range hs {
			copy(hs[i][:], b[32*i:])
		}
		f.Tree = append(f.Tree, hs)
	}
	b, fl := f.readAt(off, 8*int64(f.Records+1), "record offsets")
	if fl != nil {
		return fl
	}
	for i := 0; i <= f.Records; i++ {
		o, at := int64(binary.BigEndian.Uint64(b[8*i:])), off+8*int64(i)
		if i == 0 && o != off+int64(len(b)) {
			return malformed(at, "the first record is said to start at %d; it starts at %d", o, off+int64(len(b)))
		} else if i > 0 && (o <= f.Offsets[i-1] || o-f.Offsets[i-1] > maxRecordLen) {
			return malformed(at, "record %d would span offsets %d to %d", i-1, f.Offsets[i-1], o)
		}
		f.Offsets = append(f.Offsets, o)
	}
	return nil
}

// verify checks the hashes of the header and of the stored tree (step 4).
func (f *File) verify() *Failure {
	if got := LeafHash(f.Header); got != f.Tree[0][0] {
		return invalid(ReasonHash, Where{Offset: new(int64)}, "the header hashes to %s; the stored tree says %s", got.short(), f.Tree[0][0].short())
	}
	for l := 1; l < len(f.Tree); l++ {
		below := f.Tree[l-1]
		for i, stored := range f.Tree[l] {
			want := below[2*i]
			if 2*i+1 < len(below) {
				want = nodeHash(want, below[2*i+1])
			}
			if stored != want {
				return invalid(ReasonTree, Where{}, "stored tree level %d, hash %d is not the hash of its children", l, i)
			}
		}
	}
	return nil
}

// base is the whole's index of the file's first record.
func (f *File) base() int {
	if f.Shard != nil {
		return f.Shard.First
	}
	return 0
}

// BytesRead is the number of bytes read from the file so far.
func (f *File) BytesRead() int64 { return f.read.Load() }

// Root is the stored root.
func (f *File) Root() Hash { return f.Tree[len(f.Tree)-1][0] }

// record reads record i with its offset (step 7), against the stored tree,
// or in a part check through its audit path against the given root.
func (f *File) record(i int) ([]byte, int64, *Failure) {
	var a, e int64
	if f.root == nil {
		a, e = f.Offsets[i], f.Offsets[i+1]
	} else if b, fl := f.readAt(f.index()+8*int64(i), 16, "record offsets"); fl != nil {
		return nil, 0, fl
	} else {
		a, e = int64(binary.BigEndian.Uint64(b)), int64(binary.BigEndian.Uint64(b[8:]))
	}
	rec, fl := f.readAt(a, e-a, fmt.Sprintf("record %d", i))
	if fl != nil {
		return nil, a, fl
	}
	unit, got := "the chunk", LeafHash(rec)
	if f.Range != nil {
		unit = fmt.Sprintf("block %d", i)
	}
	if f.root == nil && got != f.Tree[0][i+1] {
		return nil, a, invalid(ReasonHash, Where{Chunk: at(i), Offset: &a, Expected: f.Tree[0][i+1].short(), Found: got.short()},
			"%s hashes to %s; the stored tree says %s", unit, got.short(), f.Tree[0][i+1].short())
	}
	if f.root != nil {
		ok, fl := f.proves(got, i+1)
		if fl == nil && !ok {
			fl = invalid(ReasonAudit, Where{Chunk: at(i), Offset: &a, Expected: f.root.String()},
				"record %d with its audit path does not lead to the root %s: a swapped record, one from another certificate, or an altered tree", i, f.root)
		}
		if fl != nil {
			return nil, a, fl
		}
	}
	return rec, a, nil
}

// end checks that no byte follows the last record (step 8).
func (f *File) end() *Failure {
	if last := f.Offsets[f.Records]; last < f.size {
		return malformed(last, "bytes follow the last record")
	}
	return nil
}

// proves says whether leaf i, hashed up its audit path (a stored sibling
// per level where one exists, read alone), leads to the root (section 7).
func (f *File) proves(leaf Hash, i int) (bool, *Failure) {
	at := int64(len(f.Header))
	sizes := levelSizes(f.Records + 1)
	for l := 0; l+1 < len(sizes); l++ {
		if sib := i ^ 1; sib < sizes[l] {
			b, fl := f.readAt(at+32*int64(sib), 32, "stored tree")
			if fl != nil {
				return false, fl
			}
			if s := Hash(b); i&1 == 0 {
				leaf = nodeHash(leaf, s)
			} else {
				leaf = nodeHash(s, leaf)
			}
		}
		at += 32 * int64(sizes[l])
		i /= 2
	}
	return leaf == *f.root, nil
}
