package emit

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"

	"golang.org/x/crypto/blake2b"

	"descent/cert"
)

// A journal keeps the completed blocks of a range run, so that an
// interrupted run can go on from its last completed block. It is
//
//	magic (16 bytes) | digest of the parameters (32) | (length u32, block record)*
//
// and a record cut short by a crash is dropped when the journal is opened.
// Blocks depend only on the parameters, so a resumed run writes the same
// certificate as one that was never interrupted.
type Journal struct {
	f *os.File
}

const journalMagic = "descent journal\x00"

var errJournalParams = errors.New("the journal belongs to a run with other parameters")

func journalDigest(p RangeParams, sh *Shard) []byte {
	d, _ := blake2b.New256(nil)
	fmt.Fprintf(d, "descent range journal v2\x00%x\x00%v\x00%v\x00%v\x00%d\x00%d\x00%d",
		p.SieveRoot[:], p.Sieve.Map, p.Lo, p.Hi, p.E, p.Cap, p.Ceiling)
	if sh != nil {
		fmt.Fprintf(d, "\x00shard %d/%d", sh.I, sh.N)
	}
	for _, r := range p.Rules {
		fmt.Fprintf(d, "\x00rule %d %d %d %d %d", r.M, r.C, r.Mp, r.Cp, r.Steps)
	}
	return d.Sum(nil)
}

// OpenJournal opens the journal at path for a run with parameters p
// (defaults filled in by NormalizeRange) and shard sh (nil for all),
// creating it if need be, and returns the block records it already holds.
func OpenJournal(path string, p RangeParams, sh *Shard) (*Journal, [][]byte, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, nil, err
	}
	head := append([]byte(journalMagic), journalDigest(p, sh)...)
	data, err := io.ReadAll(f)
	if err != nil {
		f.Close()
		return nil, nil, err
	}
	if len(data) == 0 {
		if _, err := f.Write(head); err != nil {
			f.Close()
			return nil, nil, err
		}
		return &Journal{f: f}, nil, nil
	}
	if !bytes.HasPrefix(data, head) {
		f.Close()
		return nil, nil, fmt.Errorf("%s: %w; remove it to start afresh", path, errJournalParams)
	}
	var recs [][]byte
	pos := len(head)
	for pos+4 <= len(data) {
		n := int(binary.BigEndian.Uint32(data[pos:]))
		if pos+4+n > len(data) {
			break // cut short by a crash
		}
		rec := data[pos+4 : pos+4+n]
		if _, err := cert.ParseBlock(rec, 0, len(p.Rules)); err != nil {
			break
		}
		recs = append(recs, rec)
		pos += 4 + n
	}
	if err := f.Truncate(int64(pos)); err != nil {
		f.Close()
		return nil, nil, err
	}
	if _, err := f.Seek(int64(pos), io.SeekStart); err != nil {
		f.Close()
		return nil, nil, err
	}
	return &Journal{f: f}, recs, nil
}

// Append adds a completed block and makes it durable.
func (j *Journal) Append(rec []byte) error {
	b := binary.BigEndian.AppendUint32(nil, uint32(len(rec)))
	if _, err := j.f.Write(append(b, rec...)); err != nil {
		return err
	}
	return j.f.Sync()
}

// Close closes the journal, keeping it for a later run.
func (j *Journal) Close() error { return j.f.Close() }

// Remove closes and deletes the journal once the certificate is written.
func (j *Journal) Remove() error {
	j.f.Close()
	return os.Remove(j.f.Name())
}
