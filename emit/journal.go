package emit

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"golang.org/x/crypto/blake2b"

	"descent/cert"
)

// A journal keeps the completed blocks of a range run, so that an
// interrupted run can go on from its last completed block. It is
//
//	magic (16 bytes) | digest of the parameters (32) |
//	length u32 | the parameters in words | (length u32, block record)* |
//	[stop mark: 0xffffffff, length u32, why the run failed]
//
// A record cut short by a crash is dropped when the journal is opened.
// Blocks depend only on the parameters, so a resumed run writes the same
// certificate as one that was never interrupted. The words let a run with
// other parameters say whose journal it found; the stop mark tells a
// journal of a run that failed (which no other run need wait for) from
// one of a run that was interrupted or killed (which may be resumed).
type Journal struct {
	f      *os.File
	blocks int // records held, resumed and appended
	// Failed is, when the journal was left by a run with the same
	// parameters that failed, why that run failed; the run resumes.
	Failed string
	// Discarded is, when OpenJournal found and removed the journal of a
	// failed run with other parameters, what that run was and why it
	// failed.
	Discarded string
}

const (
	journalMagic   = "descent journal2"
	journalMagicV1 = "descent journal\x00"
	stopMark       = 0xffffffff
	maxJournalText = 4096
)

var (
	errJournalParams = errors.New("the journal belongs to a run with other parameters")
	// ErrBusy says that another process holds a file's lock: another run
	// is writing the same output.
	ErrBusy = errors.New("in use by another process")
	// ErrNotJournal says that the file where the journal goes is not one.
	ErrNotJournal = errors.New("not a descent journal")
	// ErrNoLocks says that the file system or the system cannot lock
	// files, so whether another run uses a file cannot be told.
	ErrNoLocks = errors.New("file locks are not supported here")
)

// JournalConflictError is returned by OpenJournal when the journal holds
// completed blocks of an interrupted run with other parameters: that run
// may still be resumed, so the journal is left alone.
type JournalConflictError struct {
	Path   string
	Blocks int    // completed blocks it holds
	Run    string // the other run's parameters in words; empty if unknown
	Old    bool   // written by an earlier format of the journal
}

func (e *JournalConflictError) Error() string {
	if e.Old {
		return fmt.Sprintf("%s is the journal of an interrupted run written by an earlier version of descent", e.Path)
	}
	return fmt.Sprintf("%s holds %d completed blocks of an interrupted run with other parameters (%s)", e.Path, e.Blocks, e.Run)
}

func (e *JournalConflictError) Unwrap() error { return errJournalParams }

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

// journalWords describes the parameters for a person who finds the
// journal of another run.
func journalWords(p RangeParams, sh *Shard) string {
	s := fmt.Sprintf("map %v, from %v to %v, blocks of 2^%d, cap %d, ceiling 2^%d, %d predecessor rules, sieve root %x",
		p.Sieve.Map, p.Lo, p.Hi, p.E, p.Cap, p.Ceiling, len(p.Rules), p.SieveRoot[:])
	if sh != nil {
		s += fmt.Sprintf(", shard %d/%d", sh.I, sh.N)
	}
	if len(s) > maxJournalText {
		s = s[:maxJournalText]
	}
	return s
}

// journalFile is a journal's contents as read.
type journalFile struct {
	digest []byte
	words  string
	recs   [][]byte
	end    int    // the end of the last whole record
	failed string // the stop mark's reason, if any
	v1     bool
}

// parseJournal reads a journal whose block records valid accepts.
func parseJournal(data []byte, valid func([]byte) bool) (*journalFile, bool) {
	jf := &journalFile{}
	pos := len(journalMagic) + blake2b.Size256
	switch {
	case len(data) < pos:
		return nil, false
	case string(data[:len(journalMagic)]) == journalMagicV1:
		jf.v1 = true
	case string(data[:len(journalMagic)]) != journalMagic:
		return nil, false
	}
	jf.digest = data[len(journalMagic):pos]
	if !jf.v1 {
		if pos+4 > len(data) {
			return nil, false
		}
		n := int(binary.BigEndian.Uint32(data[pos:]))
		if n > maxJournalText || pos+4+n > len(data) {
			return nil, false
		}
		jf.words, pos = string(data[pos+4:pos+4+n]), pos+4+n
	}
	for pos+4 <= len(data) {
		n := binary.BigEndian.Uint32(data[pos:])
		if n == stopMark && !jf.v1 {
			if pos+8 <= len(data) {
				m := int(binary.BigEndian.Uint32(data[pos+4:]))
				if m <= maxJournalText && pos+8+m <= len(data) {
					jf.failed = string(data[pos+8 : pos+8+m])
				}
			}
			if jf.failed == "" {
				jf.failed = "unknown reason"
			}
			break
		}
		if pos+4+int(n) > len(data) {
			break // cut short by a crash
		}
		rec := data[pos+4 : pos+4+int(n)]
		if !valid(rec) {
			break
		}
		jf.recs = append(jf.recs, rec)
		pos += 4 + int(n)
	}
	jf.end = pos
	return jf, true
}

// OpenJournal opens the journal at path for a run with parameters p
// (defaults filled in by NormalizeRange) and shard sh (nil for all),
// creating it if need be, and returns the block records it already holds.
//
// A journal of the same parameters is resumed, whether its run was
// interrupted or failed (Journal.Failed says why it failed). A journal of
// other parameters whose run failed is removed and started afresh
// (Journal.Discarded says so); one whose run was interrupted or killed is
// left alone, with a *JournalConflictError. The journal is locked while
// open: ErrBusy means that another run is using it.
func OpenJournal(path string, p RangeParams, sh *Shard) (*Journal, [][]byte, error) {
	return openJournal(path, journalDigest(p, sh), journalWords(p, sh), func(rec []byte) bool {
		_, err := cert.ParseBlock(rec, 0, len(p.Rules))
		return err == nil
	})
}

// OpenCensusJournal is OpenJournal for a census run with parameters p
// (defaults filled in by NormalizeCensus).
func OpenCensusJournal(path string, p CensusParams, sh *Shard) (*Journal, [][]byte, error) {
	d, _ := blake2b.New256(nil)
	fmt.Fprintf(d, "descent census journal v1\x00%v\x00%v\x00%v\x00%d\x00%d\x00%d", p.Map, p.Lo, p.Hi, p.E, p.Cap, p.Ceiling)
	words := fmt.Sprintf("census of %v from %v to %v, blocks of 2^%d, cap %d, ceiling 2^%d", p.Map, p.Lo, p.Hi, p.E, p.Cap, p.Ceiling)
	if sh != nil {
		fmt.Fprintf(d, "\x00shard %d/%d", sh.I, sh.N)
		words += fmt.Sprintf(", shard %d/%d", sh.I, sh.N)
	}
	if len(words) > maxJournalText {
		words = words[:maxJournalText]
	}
	return openJournal(path, d.Sum(nil), words, func(rec []byte) bool {
		_, err := cert.ParseCensusBlock(rec, 0)
		return err == nil
	})
}

// openJournal opens a journal of the run whose parameters hash to digest
// and read as words; valid accepts the run's block records.
func openJournal(path string, digest []byte, words string, valid func([]byte) bool) (*Journal, [][]byte, error) {
	// Only a regular file is a journal: never follow a link, nor open a
	// device or a pipe, which the run would write to and then remove.
	if fi, err := os.Lstat(path); err == nil && !fi.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("%s: %w", path, ErrNotJournal)
	}
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, nil, err
	}
	if fi, err := f.Stat(); err != nil || !fi.Mode().IsRegular() {
		f.Close()
		return nil, nil, fmt.Errorf("%s: %w", path, ErrNotJournal)
	}
	if err := TryLock(f); err != nil && !errors.Is(err, ErrNoLocks) {
		f.Close()
		return nil, nil, fmt.Errorf("%s: %w", path, err)
	}
	j := &Journal{f: f}
	data, err := io.ReadAll(f)
	if err != nil {
		f.Close()
		return nil, nil, err
	}
	if len(data) > 0 {
		jf, ok := parseJournal(data, valid)
		switch {
		case !ok:
			f.Close()
			return nil, nil, fmt.Errorf("%s: %w", path, ErrNotJournal)
		case jf.v1 || !bytes.Equal(jf.digest, digest):
			if jf.failed == "" {
				f.Close()
				return nil, nil, &JournalConflictError{Path: path, Blocks: len(jf.recs), Run: jf.words, Old: jf.v1}
			}
			j.Discarded = fmt.Sprintf("%s; it failed: %s", jf.words, jf.failed)
			data = nil
		default:
			j.Failed = jf.failed
			if err := f.Truncate(int64(jf.end)); err != nil {
				f.Close()
				return nil, nil, err
			}
			if _, err := f.Seek(int64(jf.end), io.SeekStart); err != nil {
				f.Close()
				return nil, nil, err
			}
			j.blocks = len(jf.recs)
			return j, jf.recs, nil
		}
	}
	head := append([]byte(journalMagic), digest...)
	head = binary.BigEndian.AppendUint32(head, uint32(len(words)))
	head = append(head, words...)
	if err := f.Truncate(0); err != nil {
		f.Close()
		return nil, nil, err
	}
	if _, err := f.WriteAt(head, 0); err != nil {
		f.Close()
		return nil, nil, err
	}
	if _, err := f.Seek(int64(len(head)), io.SeekStart); err != nil {
		f.Close()
		return nil, nil, err
	}
	return j, nil, nil
}

// Append adds a completed block and makes it durable.
func (j *Journal) Append(rec []byte) error {
	b := binary.BigEndian.AppendUint32(nil, uint32(len(rec)))
	if _, err := j.f.Write(append(b, rec...)); err != nil {
		return err
	}
	j.blocks++
	return j.f.Sync()
}

// Blocks returns the number of completed blocks the journal holds.
func (j *Journal) Blocks() int { return j.blocks }

// Name returns the journal's path.
func (j *Journal) Name() string { return j.f.Name() }

// Close closes the journal, keeping it for a later run: the run was
// interrupted, and the same parameters resume it.
func (j *Journal) Close() error { return j.f.Close() }

// Fail closes the journal of a run that failed for reason why. A journal
// without completed blocks is removed; one with blocks is kept for a run
// with the same parameters, marked so that a run with other parameters
// removes it instead of waiting for it. If the mark cannot be written,
// the journal is removed: a failed run must not block the next one.
func (j *Journal) Fail(why string) error {
	if j.blocks == 0 {
		return j.Remove()
	}
	why = strings.ToValidUTF8(why, "?")
	if len(why) > maxJournalText {
		why = why[:maxJournalText]
	}
	b := binary.BigEndian.AppendUint32(nil, stopMark)
	b = binary.BigEndian.AppendUint32(b, uint32(len(why)))
	b = append(b, why...)
	if _, err := j.f.Write(b); err != nil {
		return j.Remove()
	}
	if err := j.f.Sync(); err != nil {
		return j.Remove()
	}
	return j.f.Close()
}

// Remove closes and deletes the journal once the certificate is written.
func (j *Journal) Remove() error {
	j.f.Close()
	return os.Remove(j.f.Name())
}
