package archive

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"
)

// Status is what Verify found of one entry.
type Status int

const (
	OK         Status = iota
	Damaged           // the file fails its check, or is filed under another root
	Missing           // the index lists it, but its file is gone
	Unindexed         // a good file that the index does not list
	Misindexed        // a good file of which the index says something else
	Stray             // a file under objects/ that is no archive entry
)

var statusNames = [...]string{"ok", "damaged", "missing", "not indexed", "misindexed", "stray"}

func (st Status) String() string { return statusNames[st] }

// Result is one entry of a verify.
type Result struct {
	Status  Status
	Root    string
	Path    string   // relative to the archive
	Verdict *Verdict // what the check established, for a file that passed
	Err     error    // what is wrong, for every status but OK
}

// VerifyOptions tune a verify.
type VerifyOptions struct {
	Sample  int  // audit this many blocks of each range instead of checking it in full
	Reindex bool // rebuild the index from the files that pass
	// Report, if set, is called with each result as it is found.
	Report func(Result)
}

// Summary counts the results of a verify.
type Summary struct {
	Count     [len(statusNames)]int
	IndexErr  error // the index is missing or damaged (and was not rebuilt)
	Reindexed int   // entries in a rebuilt index
}

// Problems is the number of entries found wrong, and 1 for an unusable
// index.
func (s Summary) Problems() int {
	n := 0
	for st, c := range s.Count {
		if Status(st) != OK {
			n += c
		}
	}
	if s.IndexErr != nil {
		n++
	}
	return n
}

// Verify re-checks every file of the archive against its root and the
// index, and the index against the files. With Reindex it writes a new
// index of the files that pass; the others are reported and left in place.
func (s *Store) Verify(o VerifyOptions) (Summary, error) {
	var sum Summary
	if s.o.Check == nil {
		return sum, errors.New("archive: Verify needs Options.Check")
	}
	files, strays, err := s.listObjects()
	if err != nil {
		return sum, err
	}
	report := func(r Result) {
		sum.Count[r.Status]++
		if o.Report != nil {
			o.Report(r)
		}
	}
	for _, p := range strays {
		report(Result{Status: Stray, Path: p, Err: errors.New("not an archive entry: its name is not ROOT.dcert in the directory of ROOT's first two hex digits")})
	}

	var rows []Entry
	if s.db != nil {
		if rows, err = s.entries(); err != nil {
			if !o.Reindex {
				return sum, err
			}
			s.indexErr, rows = err, nil
			s.db.Close()
			s.db = nil
		}
	}
	byRoot := map[string]*Entry{}
	for i := range rows {
		byRoot[rows[i].Root] = &rows[i]
	}
	// The index's order (sieves first), then the files it does not list.
	var order []string
	for _, e := range rows {
		if _, ok := files[e.Root]; ok {
			order = append(order, e.Root)
		}
	}
	var unlisted []string
	for root := range files {
		if byRoot[root] == nil {
			unlisted = append(unlisted, root)
		}
	}
	sort.Strings(unlisted)
	order = append(order, unlisted...)

	var good []Entry
	var checked []Entry
	for _, root := range order {
		r, e := s.verifyOne(root, byRoot[root], files, o)
		if r.Status == OK || (o.Reindex && (r.Status == Unindexed || r.Status == Misindexed)) {
			good = append(good, e)
			if r.Status == OK && !o.Reindex {
				checked = append(checked, e)
			}
			if o.Reindex {
				r.Status, r.Err = OK, nil
			}
		}
		report(r)
	}
	for _, e := range rows {
		if _, ok := files[e.Root]; !ok {
			msg := "the index lists it, but its file is gone"
			if o.Reindex {
				msg += "; the rebuilt index no longer lists it"
			}
			report(Result{Status: Missing, Root: e.Root, Path: e.Path, Err: errors.New(msg)})
		}
	}

	if o.Reindex {
		if s.db != nil {
			s.db.Close()
			s.db = nil
		}
		if err := s.newIndex(good); err != nil {
			return sum, err
		}
		s.indexErr = nil
		if err := s.openIndex(false); err != nil {
			return sum, err
		}
		sum.Reindexed = len(good)
		return sum, s.indexReady()
	}
	if s.db == nil {
		sum.IndexErr = s.indexErr
		return sum, nil
	}
	return sum, s.noteChecked(checked)
}

// verifyOne re-checks the file of root against its index entry (nil if
// none) and returns the result and the entry a new index would hold.
func (s *Store) verifyOne(root string, row *Entry, files map[string]string, o VerifyOptions) (Result, Entry) {
	path := files[root]
	res := Result{Root: root, Path: path}
	full := filepath.Join(s.dir, filepath.FromSlash(path))
	f, err := os.Open(full)
	if err != nil {
		res.Status, res.Err = Damaged, fmt.Errorf("%w: cannot read: %v", ErrMalformed, err)
		return res, Entry{}
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		res.Status, res.Err = Damaged, fmt.Errorf("%w: cannot read: %v", ErrMalformed, err)
		return res, Entry{}
	}
	v, err := s.o.Check(Subject{Name: full, R: f, Size: fi.Size(), Sample: o.Sample, Sieve: func(r string) (string, error) {
		if p, ok := files[r]; ok {
			return filepath.Join(s.dir, filepath.FromSlash(p)), nil
		}
		return "", &SieveMissingError{Root: r}
	}})
	if err == nil {
		err = v.sane()
	}
	if err == nil && v.Root != root {
		err = fmt.Errorf("%w: its root is %s: it is filed under another root", ErrInvalid, v.Root)
	}
	if err != nil {
		res.Status, res.Err = Damaged, err
		return res, Entry{}
	}
	res.Verdict = &v
	mode := "full"
	if v.Audit != "" {
		mode = v.Audit
	}
	e := Entry{Verdict: v, Path: path, Size: fi.Size(), Added: fi.ModTime().UTC().Format(time.RFC3339), Checked: now(), CheckMode: mode}
	switch {
	case row == nil:
		res.Status, res.Err = Unindexed, errors.New("a good file that the index does not list")
	default:
		e.Added = row.Added
		if d := differences(row, &v, fi.Size()); d != "" {
			res.Status, res.Err = Misindexed, fmt.Errorf("the index says %s", d)
		}
	}
	return res, e
}

// differences lists what the index says of a file that its check does
// not. The claim's wording is left out: it may change between versions
// of the checker while the facts stay the same.
func differences(row *Entry, v *Verdict, size int64) string {
	var d []string
	cmp := func(what string, idx, file any) {
		if idx != file {
			d = append(d, fmt.Sprintf("%s %v where the file has %v", what, idx, file))
		}
	}
	cmp("kind", row.Kind, v.Kind)
	cmp("map", row.Map, v.Map)
	cmp("k", row.K, v.K)
	cmp("j", row.J, v.J)
	cmp("lo", row.Lo, v.Lo)
	cmp("hi", row.Hi, v.Hi)
	cmp("sieve root", row.SieveRoot, v.SieveRoot)
	cmp("size", row.Size, size)
	return strings.Join(d, ", ")
}

// noteChecked records when the entries last passed a check.
func (s *Store) noteChecked(es []Entry) error {
	if len(es) == 0 {
		return nil
	}
	tx, err := s.db.Begin()
	if err != nil {
		return s.damaged(err)
	}
	defer tx.Rollback()
	for _, e := range es {
		if _, err := tx.Exec(`UPDATE certificates SET checked = ?, check_mode = ? WHERE root = ?`, e.Checked, e.CheckMode, e.Root); err != nil {
			return s.damaged(err)
		}
	}
	return s.damaged(tx.Commit())
}

// listObjects lists the certificate files under objects/ by root, and the
// paths of anything else there.
func (s *Store) listObjects() (files map[string]string, strays []string, err error) {
	files = map[string]string{}
	objects := filepath.Join(s.dir, objectsDir)
	subs, err := os.ReadDir(objects)
	if err != nil {
		return nil, nil, err
	}
	for _, sub := range subs {
		rel := objectsDir + "/" + sub.Name()
		if !sub.IsDir() {
			strays = append(strays, rel)
			continue
		}
		es, err := os.ReadDir(filepath.Join(objects, sub.Name()))
		if err != nil {
			return nil, nil, err
		}
		for _, e := range es {
			root, ok := strings.CutSuffix(e.Name(), ".dcert")
			p := rel + "/" + e.Name()
			if !ok || !IsRoot(root) || root[:2] != sub.Name() || !e.Type().IsRegular() {
				strays = append(strays, p)
				continue
			}
			files[root] = p
		}
	}
	return files, strays, nil
}
