// Package certtest holds what tests across the module need to take
// certificates apart and put them back together with package cert: an
// in-memory file, and the records of a certificate resealed with every
// hash and offset recomputed. Only tests import it.
package certtest

import (
	"bytes"
	"encoding/binary"
	"io"

	"descent/cert"
)

// MemFile is an in-memory io.WriterAt.
type MemFile struct{ B []byte }

func (m *MemFile) WriteAt(p []byte, off int64) (int, error) {
	if end := int(off) + len(p); end > len(m.B) {
		m.B = append(m.B, make([]byte, end-len(m.B))...)
	}
	return copy(m.B[off:], p), nil
}

// Records takes a certificate apart: its header bytes (preamble and body)
// and its records, read with package cert.
func Records(b []byte) (header []byte, recs [][]byte, err error) {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil, nil, err
	}
	for {
		r, err := rd.Next()
		if err == io.EOF {
			return bytes.Clone(rd.Header), recs, nil
		}
		if err != nil {
			return nil, nil, err
		}
		recs = append(recs, r)
	}
}

// Seal writes a certificate from its header bytes and records with every
// hash and offset recomputed; the header's record count is set to
// len(recs).
func Seal(header []byte, recs [][]byte) ([]byte, error) {
	header = bytes.Clone(header)
	binary.BigEndian.PutUint32(header[10:], uint32(len(recs)))
	var f MemFile
	w, err := cert.NewWriter(&f, header)
	if err != nil {
		return nil, err
	}
	for _, r := range recs {
		if err := w.WriteRecord(r, cert.LeafHash(r)); err != nil {
			return nil, err
		}
	}
	if _, _, err := w.Close(); err != nil {
		return nil, err
	}
	return f.B, nil
}
