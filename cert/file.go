package cert

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
)

// The container (SPEC.md, "Layout"): header, stored Merkle tree, record
// offsets, records.
const (
	Magic        = "descent\x00"
	Version      = 2
	KindSieve    = 's'
	KindJoins    = 'j' // a sieve whose survivors may be joined to smaller ones
	PreambleSize = 18

	// MaxRecords bounds the record count a preamble may declare; the stored
	// tree and the offset table grow with it.
	MaxRecords = 1 << 24
	// MaxRecordBytes bounds one record, so a reader never holds more.
	MaxRecordBytes = 1 << 30
)

// ErrMalformed is wrapped by every error about the encoding itself, as
// opposed to the truth of what it claims.
var ErrMalformed = errors.New("malformed certificate")

// FormatError names the offset of a malformed field and what is wrong.
type FormatError struct {
	Offset int64
	Reason string
}

func (e *FormatError) Error() string { return fmt.Sprintf("offset %d: %s", e.Offset, e.Reason) }
func (e *FormatError) Unwrap() error { return ErrMalformed }

// ErrVersion is wrapped by the error about a file of another format
// version: malformed for this reader, but a file to re-emit, not a damaged
// one.
var ErrVersion = errors.New("another format version")

// VersionError is a file of a format version this reader does not read.
type VersionError struct{ Version byte }

func (e *VersionError) Error() string {
	if e.Version < Version {
		return fmt.Sprintf("offset 8: format version %d is an older format that this program no longer reads; re-emit the certificate (this program reads version %d)", e.Version, Version)
	}
	return fmt.Sprintf("offset 8: unknown format version %d (this program reads version %d)", e.Version, Version)
}

// Is makes a VersionError both malformed and of another version.
func (e *VersionError) Is(target error) bool { return target == ErrMalformed || target == ErrVersion }

func versionErr(v byte) error { return &VersionError{Version: v} }

func formatErr(off int64, format string, args ...any) error {
	return &FormatError{Offset: off, Reason: fmt.Sprintf(format, args...)}
}

type preamble struct {
	kind    byte
	records int
	bodyLen int
}

func appendPreamble(b []byte, kind byte, records int, body []byte) []byte {
	b = append(b, Magic...)
	b = append(b, Version, kind)
	b = binary.BigEndian.AppendUint32(b, uint32(records))
	b = binary.BigEndian.AppendUint32(b, uint32(len(body)))
	return append(b, body...)
}

func parsePreamble(b []byte) (preamble, error) {
	var p preamble
	if len(b) < PreambleSize {
		return p, formatErr(int64(len(b)), "file ends inside the %d-byte preamble", PreambleSize)
	}
	if string(b[:8]) != Magic {
		return p, formatErr(0, "not a descent certificate (magic %q)", b[:8])
	}
	if b[8] != Version {
		return p, versionErr(b[8])
	}
	p.kind = b[9]
	if p.kind != KindSieve && p.kind != KindJoins && p.kind != KindRange && p.kind != KindShard && p.kind != KindCensus {
		return p, formatErr(9, "unknown certificate kind %q", p.kind)
	}
	records := binary.BigEndian.Uint32(b[10:])
	if records < 1 || records > MaxRecords {
		return p, formatErr(10, "%d records: want 1 to %d", records, MaxRecords)
	}
	body := binary.BigEndian.Uint32(b[14:])
	if body > MaxHeaderBody {
		return p, formatErr(14, "header body of %d bytes exceeds the cap of %d", body, MaxHeaderBody)
	}
	p.records, p.bodyLen = int(records), int(body)
	return p, nil
}

// Layout gives the position of every part of a certificate.
type Layout struct {
	HeaderLen  int64
	Records    int
	Sizes      []int // tree level sizes over Records+1 leaves
	TreeOff    int64
	OffsetsOff int64
	RecordsOff int64
}

func newLayout(headerLen int64, records int) Layout {
	l := Layout{HeaderLen: headerLen, Records: records, Sizes: LevelSizes(records + 1), TreeOff: headerLen}
	nodes := 0
	for _, s := range l.Sizes {
		nodes += s
	}
	l.OffsetsOff = l.TreeOff + int64(nodes)*int64(len(Hash{}))
	l.RecordsOff = l.OffsetsOff + 8*int64(records+1)
	return l
}

// NodeOff is the file offset of hash index on the given tree level.
func (l Layout) NodeOff(level, index int) int64 {
	off := l.TreeOff
	for i := 0; i < level; i++ {
		off += int64(l.Sizes[i]) * int64(len(Hash{}))
	}
	return off + int64(index)*int64(len(Hash{}))
}

// Writer writes a certificate through an io.WriterAt: the header first,
// then records in order; the tree and the offsets, which precede the
// records in the file, are filled in as records arrive, so memory stays
// bounded whatever the number of records.
type Writer struct {
	w      io.WriterAt
	lay    Layout
	tb     *treeBuilder
	next   int
	pos    int64
	root   Hash
	header []byte
}

// NewWriter writes header, a complete header as returned by Marshal.
func NewWriter(w io.WriterAt, header []byte) (*Writer, error) {
	p, err := parsePreamble(header)
	if err != nil {
		return nil, err
	}
	wr := &Writer{w: w, lay: newLayout(int64(len(header)), p.records)}
	wr.pos = wr.lay.RecordsOff
	wr.tb = newTreeBuilder(p.records+1, func(level, index int, h Hash) error {
		if level == len(wr.lay.Sizes)-1 {
			wr.root = h
		}
		_, err := w.WriteAt(h[:], wr.lay.NodeOff(level, index))
		return err
	})
	wr.header = header
	_, err = w.WriteAt(header, 0)
	return wr, err
}

// SetHeader replaces the header, before Close, by one of the same length:
// a writer may learn counts only as it goes. The tree's nodes that depend
// on the header are computed at Close.
func (w *Writer) SetHeader(header []byte) error {
	if len(header) != len(w.header) {
		return fmt.Errorf("a header of %d bytes cannot replace one of %d", len(header), len(w.header))
	}
	p, err := parsePreamble(header)
	if err != nil {
		return err
	}
	if p.records != w.lay.Records {
		return fmt.Errorf("the new header declares %d records, the old %d", p.records, w.lay.Records)
	}
	w.header = header
	_, err = w.w.WriteAt(header, 0)
	return err
}

// WriteRecord appends the next record, whose leaf hash the caller computed
// with LeafHash (so that workers can hash in parallel).
func (w *Writer) WriteRecord(rec []byte, leaf Hash) error {
	if w.next >= w.lay.Records {
		return fmt.Errorf("record %d beyond the %d the header declares", w.next, w.lay.Records)
	}
	if _, err := w.w.WriteAt(rec, w.pos); err != nil {
		return err
	}
	if err := w.putOffset(w.next, w.pos); err != nil {
		return err
	}
	w.pos += int64(len(rec))
	w.next++
	return w.tb.add(0, w.next, leaf)
}

func (w *Writer) putOffset(i int, off int64) error {
	var b [8]byte
	binary.BigEndian.PutUint64(b[:], uint64(off))
	_, err := w.w.WriteAt(b[:], w.lay.OffsetsOff+8*int64(i))
	return err
}

// Close writes the final offset and returns the root and the file size.
func (w *Writer) Close() (Hash, int64, error) {
	if w.next != w.lay.Records {
		return Hash{}, 0, fmt.Errorf("%d records written, the header declares %d", w.next, w.lay.Records)
	}
	if err := w.tb.spine(LeafHash(w.header)); err != nil {
		return Hash{}, 0, err
	}
	return w.root, w.pos, w.putOffset(w.lay.Records, w.pos)
}

// Reader reads a certificate front to back from any io.Reader.
type Reader struct {
	r      io.Reader
	off    int64
	Kind   byte
	Header []byte // the complete header, leaf 0 of the tree
	Layout Layout
	Levels [][]Hash // the stored tree; the last level is the root
	Offs   []int64  // the stored record offsets, Records+1 of them
	next   int
}

// NewReader reads the header, the stored tree and the offsets, and checks
// that the offsets describe the layout exactly.
func NewReader(r io.Reader) (*Reader, error) {
	rd := &Reader{r: r}
	pre, err := rd.read(PreambleSize, "preamble")
	if err != nil {
		return nil, err
	}
	p, err := parsePreamble(pre)
	if err != nil {
		return nil, err
	}
	body, err := rd.read(int64(p.bodyLen), "header body")
	if err != nil {
		return nil, err
	}
	rd.Kind, rd.Header = p.kind, append(pre, body...)
	rd.Layout = newLayout(int64(len(rd.Header)), p.records)
	for level, size := range rd.Layout.Sizes {
		b, err := rd.read(int64(size)*int64(len(Hash{})), fmt.Sprintf("tree level %d", level))
		if err != nil {
			return nil, err
		}
		hs := make([]Hash, size)
		for i := range hs {
			copy(hs[i][:], b[i*len(Hash{}):])
		}
		rd.Levels = append(rd.Levels, hs)
	}
	b, err := rd.read(8*int64(p.records+1), "record offsets")
	if err != nil {
		return nil, err
	}
	prev := rd.Layout.RecordsOff
	for i := 0; i <= p.records; i++ {
		off := int64(binary.BigEndian.Uint64(b[8*i:]))
		where := rd.Layout.OffsetsOff + 8*int64(i)
		switch {
		case i == 0 && off != rd.Layout.RecordsOff:
			return nil, formatErr(where, "record 0 at offset %d; the records start at %d", off, rd.Layout.RecordsOff)
		case i > 0 && (off <= prev || off-prev > MaxRecordBytes):
			return nil, formatErr(where, "record %d ends at offset %d, after a start at %d (records are 1 to %d bytes)", i-1, off, prev, MaxRecordBytes)
		}
		rd.Offs = append(rd.Offs, off)
		prev = off
	}
	return rd, nil
}

// Root is the stored root, not yet checked against anything.
func (rd *Reader) Root() Hash { return rd.Levels[len(rd.Levels)-1][0] }

// Next returns the next record. After the last record it returns io.EOF,
// once it has made sure no byte follows.
func (rd *Reader) Next() ([]byte, error) {
	if rd.next == rd.Layout.Records {
		var one [1]byte
		if n, _ := io.ReadFull(rd.r, one[:]); n > 0 {
			return nil, formatErr(rd.off, "trailing bytes after the last record")
		}
		return nil, io.EOF
	}
	n := rd.Offs[rd.next+1] - rd.Offs[rd.next]
	rec, err := rd.read(n, fmt.Sprintf("record %d", rd.next))
	if err != nil {
		return nil, err
	}
	rd.next++
	return rec, nil
}

// read returns exactly n bytes. It grows its buffer as bytes arrive, so a
// length field that claims more than the input holds costs no more memory
// than the input itself.
func (rd *Reader) read(n int64, what string) ([]byte, error) {
	var buf bytes.Buffer
	got, err := io.CopyN(&buf, rd.r, n)
	rd.off += got
	if got < n {
		if err == io.EOF || err == nil {
			return nil, formatErr(rd.off, "file ends inside the %s (%d of %d bytes)", what, got, n)
		}
		return nil, err
	}
	return buf.Bytes(), nil
}

// ErrHashMismatch is wrapped by errors about stored hashes that do not
// match what they hash.
var ErrHashMismatch = errors.New("hash mismatch")

// CheckTree checks that leaf 0 of the stored tree is the header's hash and
// that every stored inner hash matches its children. It reads no record;
// leaves 1.. are only as good as the records they stand for.
func (rd *Reader) CheckTree() error {
	if got := LeafHash(rd.Header); got != rd.Levels[0][0] {
		return fmt.Errorf("the header hashes to %v, the stored tree says %v: %w", got, rd.Levels[0][0], ErrHashMismatch)
	}
	want := Levels(rd.Levels[0])
	for l := range want {
		for i := range want[l] {
			if want[l][i] != rd.Levels[l][i] {
				return fmt.Errorf("stored tree level %d, hash %d does not match its children: %w", l, i, ErrHashMismatch)
			}
		}
	}
	return nil
}
