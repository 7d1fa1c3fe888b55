package archive

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// Added is the outcome of one file of an add.
type Added struct {
	File    string
	Verdict Verdict
	Path    string // the stored file, relative to the archive
	// Already: the root was archived, with its file in place, before this
	// add; nothing changed for it.
	Already bool
	// SameAs names an earlier file of this add with the same root.
	SameAs string
}

// Refused is a file an add refused, and why: the error wraps ErrInvalid or
// ErrMalformed, or is a *SieveMissingError.
type Refused struct {
	File string
	Err  error
}

// RefusedError is returned by an add that refused at least one file. It
// stored nothing, not even the files that passed.
type RefusedError struct {
	Refused []Refused
	Passed  []Added // the files that passed their check
}

func (e *RefusedError) Error() string {
	var parts []string
	for _, r := range e.Refused {
		parts = append(parts, fmt.Sprintf("%s: %v", r.File, r.Err))
	}
	return "refused " + strings.Join(parts, "; ")
}

// staged is one file of an add: copied under tmp/, then checked.
type staged struct {
	file    string
	tmp     string
	size    int64
	verdict *Verdict
	err     error
}

// Add checks each file and stores it under its root, all or nothing: if
// any file is refused, none is stored. A range finds its sieve among the
// files of the same add or in the archive. What is checked is the copy
// the archive keeps, so a file changed during the add cannot slip in.
func (s *Store) Add(files []string) ([]Added, error) {
	if s.o.Check == nil {
		return nil, errors.New("archive: Add needs Options.Check")
	}
	if err := s.indexReady(); err != nil {
		return nil, err
	}
	items := make([]*staged, len(files))
	defer func() {
		for _, it := range items {
			if it != nil && it.tmp != "" {
				os.Remove(it.tmp)
			}
		}
	}()
	for i, f := range files {
		items[i] = s.stage(f)
	}
	s.pause("staged")

	// A range whose sieve is among the files may come before it: check
	// what can be checked, and retry the rest while that makes progress.
	todo := items
	for len(todo) > 0 {
		var later []*staged
		for _, it := range todo {
			if it.err != nil {
				continue
			}
			v, err := s.checkStaged(it, items)
			var missing *SieveMissingError
			switch {
			case errors.As(err, &missing):
				later = append(later, it)
				it.err = err
			case err != nil:
				it.err = err
			default:
				if err := v.sane(); err != nil {
					it.err = fmt.Errorf("%w: %v", ErrMalformed, err)
				} else {
					it.verdict, it.err = &v, nil
				}
			}
		}
		if len(later) == len(todo) {
			break
		}
		for _, it := range later {
			it.err = nil
		}
		todo = later
	}

	var out []Added
	var refused []Refused
	first := map[string]string{}
	for _, it := range items {
		if it.err != nil {
			refused = append(refused, Refused{File: it.file, Err: it.err})
			continue
		}
		a := Added{File: it.file, Verdict: *it.verdict, Path: relPath(it.verdict.Root)}
		if f, ok := first[a.Verdict.Root]; ok {
			a.SameAs = f
		} else {
			first[a.Verdict.Root] = it.file
		}
		out = append(out, a)
	}
	if len(refused) > 0 {
		return nil, &RefusedError{Refused: refused, Passed: out}
	}
	s.pause("checked")
	if err := s.store(items, out); err != nil {
		return nil, err
	}
	return out, nil
}

// stage copies a file under tmp/ and syncs it.
func (s *Store) stage(file string) *staged {
	it := &staged{file: file}
	src, err := os.Open(file)
	if err != nil {
		it.err = fmt.Errorf("%w: cannot read: %v", ErrMalformed, err)
		return it
	}
	defer src.Close()
	if fi, err := src.Stat(); err == nil && !fi.Mode().IsRegular() {
		it.err = fmt.Errorf("%w: not a regular file", ErrMalformed)
		return it
	}
	dst, err := os.CreateTemp(filepath.Join(s.dir, tmpDir), "add-*.dcert")
	if err != nil {
		it.err = err
		return it
	}
	it.tmp = dst.Name()
	it.size, err = io.Copy(dst, src)
	if err == nil {
		err = dst.Sync()
	}
	if cerr := dst.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		it.err = fmt.Errorf("copying into the archive: %w", err)
	}
	return it
}

func (s *Store) checkStaged(it *staged, batch []*staged) (Verdict, error) {
	f, err := os.Open(it.tmp)
	if err != nil {
		return Verdict{}, err
	}
	defer f.Close()
	return s.o.Check(Subject{Name: it.file, R: f, Size: it.size, Sieve: func(root string) (string, error) {
		for _, b := range batch {
			if b.verdict != nil && b.verdict.Root == root {
				return b.tmp, nil
			}
		}
		return s.storedFile(root)
	}})
}

// storedFile finds a stored certificate by its root.
func (s *Store) storedFile(root string) (string, error) {
	if IsRoot(root) && s.db != nil {
		e, err := s.entry(root)
		if err != nil {
			return "", err
		}
		if e != nil {
			p := s.objectPath(root)
			if _, err := os.Stat(p); err == nil {
				return p, nil
			}
		}
	}
	return "", &SieveMissingError{Root: root}
}

// sameBytes reports whether two files hold the same bytes.
func sameBytes(a, b string) bool {
	fa, err := os.Open(a)
	if err != nil {
		return false
	}
	defer fa.Close()
	fb, err := os.Open(b)
	if err != nil {
		return false
	}
	defer fb.Close()
	ba, bb := make([]byte, 1<<16), make([]byte, 1<<16)
	for {
		na, ea := io.ReadFull(fa, ba)
		nb, eb := io.ReadFull(fb, bb)
		if na != nb || !bytes.Equal(ba[:na], bb[:nb]) {
			return false
		}
		endA := ea == io.EOF || ea == io.ErrUnexpectedEOF
		endB := eb == io.EOF || eb == io.ErrUnexpectedEOF
		if endA || endB {
			return endA && endB
		}
		if ea != nil || eb != nil {
			return false
		}
	}
}

// store files the checked copies: entries recorded as pending, files
// renamed into place, entries marked stored. A kill between any two steps
// is settled by the next Open (see recover).
func (s *Store) store(items []*staged, out []Added) error {
	var fresh []*staged
	var entries []Entry
	for i, it := range items {
		a := &out[i]
		if a.SameAs != "" {
			continue
		}
		e, err := s.entry(a.Verdict.Root)
		if err != nil {
			return err
		}
		if e != nil && sameBytes(s.objectPath(e.Root), it.tmp) {
			a.Already = true
			continue
		}
		// Not archived, or its file is gone or damaged: the checked copy
		// takes its place.
		t := now()
		entries = append(entries, Entry{Verdict: *it.verdict, Path: a.Path, Size: it.size, Added: t, Checked: t, CheckMode: "full"})
		fresh = append(fresh, it)
	}
	if len(fresh) == 0 {
		return nil
	}
	tx, err := s.db.Begin()
	if err != nil {
		return s.damaged(err)
	}
	for _, e := range entries {
		if err := insert(tx, e, "pending"); err != nil {
			tx.Rollback()
			return err
		}
	}
	if err := tx.Commit(); err != nil {
		return s.damaged(err)
	}
	s.pause("pending")

	objects := filepath.Join(s.dir, objectsDir)
	for i, it := range fresh {
		root := it.verdict.Root
		sub := filepath.Join(objects, root[:2])
		if _, err := os.Stat(sub); errors.Is(err, fs.ErrNotExist) {
			if err := os.Mkdir(sub, 0o755); err != nil {
				return err
			}
			if err := syncDir(objects); err != nil {
				return err
			}
		}
		if err := os.Chmod(it.tmp, 0o444); err != nil {
			return err
		}
		if err := os.Rename(it.tmp, s.objectPath(root)); err != nil {
			return err
		}
		it.tmp = ""
		if err := syncDir(sub); err != nil {
			return err
		}
		if i == 0 {
			s.pause("renamed")
		}
	}

	tx, err = s.db.Begin()
	if err != nil {
		return s.damaged(err)
	}
	defer tx.Rollback()
	for _, e := range entries {
		if _, err := tx.Exec(`UPDATE certificates SET state = 'stored' WHERE root = ?`, e.Root); err != nil {
			return s.damaged(err)
		}
	}
	s.pause("marking")
	return s.damaged(tx.Commit())
}
