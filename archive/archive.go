// Package archive owns a directory of certificates filed under their
// roots, and its index, an SQLite database that users may query.
//
// The files are the truth; the index is derived from them and can be
// rebuilt from them (Store.Verify with Reindex). The archive does not
// check certificates itself: the caller supplies a CheckFunc, so that the
// checker can change without this package knowing how it works.
//
// # Layout
//
//	DIR/descent-archive.txt        marks the directory and describes this layout
//	DIR/objects/XX/ROOT.dcert      a certificate, named by its root (64 hex digits;
//	                               XX its first two)
//	DIR/index.db                   the index (schema below)
//	DIR/tmp/                       files of an add in progress
//	DIR/lock                       held by the one descent using the archive
//
// # Index schema (SQLite, PRAGMA user_version = 1)
//
//	CREATE TABLE certificates (
//	  root       TEXT PRIMARY KEY,  -- the certificate's root, 64 lowercase hex digits
//	  kind       TEXT NOT NULL,     -- 'sieve' or 'range'
//	  map        TEXT NOT NULL,     -- '3n+1', '5n+1', ...
//	  k          INTEGER,           -- the sieve's modulus exponent (sieves and ranges)
//	  j          INTEGER,           -- a sieve's step budget; NULL for a range
//	  lo         TEXT,              -- a range's [lo, hi), in decimal; NULL for a sieve
//	  hi         TEXT,
//	  lo_key     TEXT,              -- lo and hi in a form that sorts as numbers:
//	  hi_key     TEXT,              --   printf('%04d:%s', length(n), n)
//	  sieve_root TEXT,              -- the sieve a range rests on; NULL for a sieve
//	  claim      TEXT NOT NULL,     -- the claim in one line, as 'descent check' prints it
//	  path       TEXT NOT NULL,     -- the file, relative to DIR
//	  size       INTEGER NOT NULL,  -- its length in bytes
//	  added      TEXT NOT NULL,     -- when it was added (RFC 3339, UTC)
//	  checked    TEXT NOT NULL,     -- the last check that passed (add or verify)
//	  check_mode TEXT NOT NULL,     -- 'full', or the audit that check was
//	  state      TEXT NOT NULL      -- 'stored'; 'pending' only inside an add
//	);
//	CREATE VIEW archived AS SELECT * FROM certificates WHERE state = 'stored';
//
// Numbers can have hundreds of digits, more than SQLite's integers hold,
// so lo and hi are text, and lo_key and hi_key compare as the numbers do.
// "Which 3n+1 certificates cover 2^60?":
//
//	sqlite3 DIR/index.db "SELECT root, lo, hi FROM archived WHERE map = '3n+1'
//	  AND lo_key <= printf('%04d:%s', 19, '1152921504606846976')
//	  AND hi_key >  printf('%04d:%s', 19, '1152921504606846976')"
//
// A later kind of certificate over a range of numbers (a census) takes
// the same columns: kind, map, lo, hi and, if it rests on one, sieve_root.
//
// # Durability
//
// Every file is written under tmp/, synced, renamed into place and its
// directory synced. An add first records its entries as 'pending', then
// renames the files, then marks them 'stored'; the next command to open the
// archive finishes or undoes an add that was killed (a pending entry whose
// file is in place was checked before the rename, which is atomic) and
// removes what tmp/ holds. One process at a time uses an archive: the others
// wait for its lock.
package archive

import (
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// The layout of an archive directory.
const (
	markerName = "descent-archive.txt"
	indexName  = "index.db"
	objectsDir = "objects"
	tmpDir     = "tmp"
	lockName   = "lock"

	// layoutVersion is the first line of the marker; a layout this package
	// cannot read has another.
	layoutVersion = "descent archive, layout 1"
)

const marker = layoutVersion + `
This directory is an archive of descent certificates.
objects/XX/ROOT.dcert  a certificate, named by its root (XX: the root's first two hex digits)
index.db               an SQLite index of the certificates (the schema is in the
                       documentation of the Go package descent/archive); it is rebuilt
                       from objects/ by 'descent archive verify -reindex DIR'
tmp/                   files of an add in progress; removed by the next command
lock                   held by the one descent using the archive
Add, check and find with 'descent archive add', 'verify' and 'find'.
`

// Errors callers branch on with errors.Is.
var (
	// ErrNotArchive: the directory is not an archive (and, when creating
	// one, is not empty either).
	ErrNotArchive = errors.New("not a descent archive")
	// ErrIndex: the index is missing or damaged while certificates are
	// stored; Verify with Reindex rebuilds it from the files.
	ErrIndex = errors.New("the index is missing or damaged")
	// ErrInvalid: a certificate does not prove what it says (a CheckFunc
	// wraps it, and the archive wraps it for a damaged entry).
	ErrInvalid = errors.New("invalid")
	// ErrMalformed: a file is no certificate the archive takes, or cannot
	// be read; a CheckFunc wraps it.
	ErrMalformed = errors.New("malformed")
)

// Options open a store.
type Options struct {
	// Create makes DIR an archive if it does not exist or is empty.
	Create bool
	// Check checks certificates; Add and Verify need it, Find does not.
	Check CheckFunc
	// Waiting, if set, is called once when another process holds the
	// archive, before waiting for it.
	Waiting func()
	// Pause, if set, is called at named points of an add ("staged",
	// "checked", "pending", "renamed", "marking"). Tests stop the process
	// there to kill it; nothing else sets it.
	Pause func(point string)
}

// Store is an open archive. It holds the archive's lock until Close.
type Store struct {
	dir      string
	o        Options
	lock     *os.File
	db       *sql.DB // nil when the index is missing or damaged
	indexErr error   // why db is nil
	// Recovered says what opening the store cleaned up after an
	// interrupted add.
	Recovered Recovery
}

// Recovery is what Open cleaned up after a killed add.
type Recovery struct {
	Temporaries int // files removed from tmp/
	Completed   int // pending entries whose file was in place: now stored
	Undone      int // pending entries whose file was not: removed from the index
}

// Any reports whether anything was cleaned up.
func (r Recovery) Any() bool { return r.Temporaries+r.Completed+r.Undone > 0 }

// Open opens the archive in dir, waiting for its lock, and cleans up after
// an add that was killed.
func Open(dir string, o Options) (*Store, error) {
	s := &Store{dir: dir, o: o}
	fresh, err := s.prepare()
	if err != nil {
		return nil, err
	}
	if s.lock, err = lockDir(filepath.Join(dir, lockName), o.Waiting); err != nil {
		return nil, fmt.Errorf("%s: %w", dir, err)
	}
	if err := s.openIndex(fresh); err != nil {
		s.Close()
		return nil, err
	}
	if err := s.recover(); err != nil {
		s.Close()
		return nil, err
	}
	return s, nil
}

// Close releases the index and the lock.
func (s *Store) Close() error {
	var err error
	if s.db != nil {
		err = s.db.Close()
		s.db = nil
	}
	if s.lock != nil {
		unlockDir(s.lock)
		s.lock = nil
	}
	return err
}

// Dir is the archive's directory.
func (s *Store) Dir() string { return s.dir }

// prepare makes sure dir is an archive, creating one if asked; fresh
// reports that it holds no certificate yet.
func (s *Store) prepare() (fresh bool, err error) {
	b, err := os.ReadFile(filepath.Join(s.dir, markerName))
	switch {
	case err == nil:
		if first, _, _ := strings.Cut(string(b), "\n"); first != layoutVersion {
			return false, fmt.Errorf("%s: %w: %s starts %q, not %q", s.dir, ErrNotArchive, markerName, first, layoutVersion)
		}
	case !errors.Is(err, fs.ErrNotExist):
		return false, fmt.Errorf("%s: %w", s.dir, err)
	case !s.o.Create:
		return false, fmt.Errorf("%s: %w (no %s)", s.dir, ErrNotArchive, markerName)
	default:
		if err := s.create(); err != nil {
			return false, err
		}
	}
	for _, d := range []string{objectsDir, tmpDir} {
		if err := os.MkdirAll(filepath.Join(s.dir, d), 0o755); err != nil {
			return false, err
		}
	}
	entries, err := os.ReadDir(filepath.Join(s.dir, objectsDir))
	if err != nil {
		return false, err
	}
	return len(entries) == 0, nil
}

// create makes an empty or missing dir an archive: the marker comes first,
// so that a kill leaves either no archive or an empty one.
func (s *Store) create() error {
	entries, err := os.ReadDir(s.dir)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if err := os.MkdirAll(s.dir, 0o755); err != nil {
			return err
		}
		if err := syncDir(filepath.Dir(filepath.Clean(s.dir))); err != nil {
			return err
		}
	case err != nil:
		return fmt.Errorf("%s: %w", s.dir, err)
	case len(entries) > 0:
		return fmt.Errorf("%s: %w: the directory is not empty and has no %s", s.dir, ErrNotArchive, markerName)
	}
	return writeFileAtomic(s.dir, markerName, []byte(marker), 0o644)
}

func (s *Store) objectPath(root string) string {
	return filepath.Join(s.dir, objectsDir, root[:2], root+".dcert")
}

// relPath is the object's path relative to the archive, as the index holds it.
func relPath(root string) string {
	return objectsDir + "/" + root[:2] + "/" + root + ".dcert"
}

func (s *Store) pause(point string) {
	if s.o.Pause != nil {
		s.o.Pause(point)
	}
}

// recover removes what tmp/ holds and settles pending entries.
func (s *Store) recover() error {
	tmp := filepath.Join(s.dir, tmpDir)
	entries, err := os.ReadDir(tmp)
	if err != nil {
		return err
	}
	for _, e := range entries {
		if err := os.RemoveAll(filepath.Join(tmp, e.Name())); err != nil {
			return err
		}
		s.Recovered.Temporaries++
	}
	if s.db == nil {
		return nil
	}
	pending, err := s.rootsInState("pending")
	if err != nil {
		return s.damaged(err)
	}
	if len(pending) == 0 {
		return nil
	}
	tx, err := s.db.Begin()
	if err != nil {
		return s.damaged(err)
	}
	defer tx.Rollback()
	for _, root := range pending {
		q := `UPDATE certificates SET state = 'stored' WHERE root = ?`
		if _, err := os.Stat(s.objectPath(root)); errors.Is(err, fs.ErrNotExist) {
			q = `DELETE FROM certificates WHERE root = ?`
			s.Recovered.Undone++
		} else {
			s.Recovered.Completed++
		}
		if _, err := tx.Exec(q, root); err != nil {
			return s.damaged(err)
		}
	}
	return tx.Commit()
}
