package archive

import (
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	_ "modernc.org/sqlite" // the pure-Go SQLite driver, "sqlite"
)

// schemaVersion is PRAGMA user_version of an index this package writes.
const schemaVersion = 1

// schema is the index, as the package documentation shows it.
const schema = `
CREATE TABLE certificates (
  root       TEXT PRIMARY KEY NOT NULL,
  kind       TEXT NOT NULL,
  map        TEXT NOT NULL,
  k          INTEGER,
  j          INTEGER,
  lo         TEXT,
  hi         TEXT,
  lo_key     TEXT,
  hi_key     TEXT,
  sieve_root TEXT,
  claim      TEXT NOT NULL,
  path       TEXT NOT NULL,
  size       INTEGER NOT NULL,
  added      TEXT NOT NULL,
  checked    TEXT NOT NULL,
  check_mode TEXT NOT NULL,
  state      TEXT NOT NULL CHECK (state IN ('stored', 'pending'))
);
CREATE INDEX certificates_by_bounds ON certificates (map, kind, lo_key, hi_key);
CREATE INDEX certificates_by_sieve ON certificates (sieve_root);
CREATE VIEW archived AS SELECT * FROM certificates WHERE state = 'stored';
PRAGMA user_version = 1;
`

// Entry is one certificate in the index.
type Entry struct {
	Verdict
	Path      string // relative to the archive's directory, with slashes
	Size      int64
	Added     string // RFC 3339, UTC
	Checked   string // the last check that passed
	CheckMode string // "full", or the audit it was
}

// openDB opens an SQLite file. A rollback journal with synchronous=FULL
// makes every committed transaction durable; a killed one is rolled back
// from its journal when the file is next opened.
func openDB(path string) (*sql.DB, error) {
	db, err := sql.Open("sqlite", "file:"+path+"?_pragma=busy_timeout(10000)&_pragma=synchronous(FULL)&_pragma=journal_mode(DELETE)&_txlock=immediate")
	if err != nil {
		return nil, err
	}
	db.SetMaxOpenConns(1)
	return db, nil
}

// openIndex opens index.db, or creates it in an archive that holds no
// certificate yet. A missing or damaged index leaves s.db nil and says why
// in s.indexErr.
func (s *Store) openIndex(fresh bool) error {
	path := filepath.Join(s.dir, indexName)
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		if !fresh {
			s.indexErr = fmt.Errorf("%w: %s is missing", ErrIndex, filepath.Join(s.dir, indexName))
			return nil
		}
		if err := s.newIndex(nil); err != nil {
			return err
		}
	}
	db, err := openDB(path)
	if err != nil {
		return err
	}
	var v int
	if err := db.QueryRow(`PRAGMA user_version`).Scan(&v); err != nil {
		db.Close()
		s.indexErr = fmt.Errorf("%w: %s: %v", ErrIndex, path, err)
		return nil
	}
	var n int
	err = db.QueryRow(`SELECT count(*) FROM sqlite_schema WHERE name = 'certificates' AND type = 'table'`).Scan(&n)
	if err != nil || v != schemaVersion || n != 1 {
		db.Close()
		s.indexErr = fmt.Errorf("%w: %s is not an index of layout %d (user_version %d)", ErrIndex, path, schemaVersion, v)
		return nil
	}
	s.db = db
	return nil
}

// newIndex writes an index holding entries under tmp/, then moves it onto
// index.db. The old index, if any, must be closed, and its journal is
// removed first: SQLite would otherwise replay it into the new file.
func (s *Store) newIndex(entries []Entry) error {
	tmp, err := os.CreateTemp(filepath.Join(s.dir, tmpDir), "index-*.db")
	if err != nil {
		return err
	}
	name := tmp.Name()
	tmp.Close()
	defer os.Remove(name)
	db, err := openDB(name)
	if err != nil {
		return err
	}
	if _, err := db.Exec(schema); err != nil {
		db.Close()
		return fmt.Errorf("creating the index: %w", err)
	}
	tx, err := db.Begin()
	if err != nil {
		db.Close()
		return err
	}
	for _, e := range entries {
		if err := insert(tx, e, "stored"); err != nil {
			tx.Rollback()
			db.Close()
			return err
		}
	}
	if err := tx.Commit(); err != nil {
		db.Close()
		return err
	}
	if err := db.Close(); err != nil {
		return err
	}
	if err := syncFile(name); err != nil {
		return err
	}
	path := filepath.Join(s.dir, indexName)
	if err := os.Remove(path + "-journal"); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	if err := os.Rename(name, path); err != nil {
		return err
	}
	return syncDir(s.dir)
}

func nullInt(x int) any {
	if x == 0 {
		return nil
	}
	return x
}

func nullText(x string) any {
	if x == "" {
		return nil
	}
	return x
}

func insert(tx *sql.Tx, e Entry, state string) error {
	var loKey, hiKey any
	if e.Lo != "" {
		loKey, hiKey = numKey(e.Lo), numKey(e.Hi)
	}
	_, err := tx.Exec(`INSERT OR REPLACE INTO certificates
		(root, kind, map, k, j, lo, hi, lo_key, hi_key, sieve_root, claim, path, size, added, checked, check_mode, state)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		e.Root, e.Kind, e.Map, nullInt(e.K), nullInt(e.J), nullText(e.Lo), nullText(e.Hi), loKey, hiKey,
		nullText(e.SieveRoot), e.Claim, e.Path, e.Size, e.Added, e.Checked, e.CheckMode, state)
	if err != nil {
		return fmt.Errorf("index: %w", err)
	}
	return nil
}

const entryColumns = `root, kind, map, k, j, lo, hi, sieve_root, claim, path, size, added, checked, check_mode`

func scanEntries(rows *sql.Rows) ([]Entry, error) {
	defer rows.Close()
	var out []Entry
	for rows.Next() {
		var e Entry
		var k, j sql.NullInt64
		var lo, hi, sieve sql.NullString
		if err := rows.Scan(&e.Root, &e.Kind, &e.Map, &k, &j, &lo, &hi, &sieve, &e.Claim, &e.Path, &e.Size,
			&e.Added, &e.Checked, &e.CheckMode); err != nil {
			return nil, err
		}
		e.K, e.J, e.Lo, e.Hi, e.SieveRoot = int(k.Int64), int(j.Int64), lo.String, hi.String, sieve.String
		out = append(out, e)
	}
	return out, rows.Err()
}

// entries returns the stored entries, sieves first.
func (s *Store) entries() ([]Entry, error) {
	rows, err := s.db.Query(`SELECT ` + entryColumns + ` FROM certificates WHERE state = 'stored'
		ORDER BY kind <> 'sieve', kind, map, lo_key, root`)
	if err != nil {
		return nil, s.damaged(err)
	}
	es, err := scanEntries(rows)
	if err != nil {
		return nil, s.damaged(err)
	}
	return es, nil
}

func (s *Store) entry(root string) (*Entry, error) {
	rows, err := s.db.Query(`SELECT `+entryColumns+` FROM certificates WHERE state = 'stored' AND root = ?`, root)
	if err != nil {
		return nil, s.damaged(err)
	}
	es, err := scanEntries(rows)
	if err != nil || len(es) == 0 {
		return nil, s.damaged(err)
	}
	return &es[0], nil
}

func (s *Store) rootsInState(state string) ([]string, error) {
	rows, err := s.db.Query(`SELECT root FROM certificates WHERE state = ?`, state)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var r string
		if err := rows.Scan(&r); err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, rows.Err()
}

// damaged wraps an error of the index as ErrIndex; nil stays nil.
func (s *Store) damaged(err error) error {
	if err == nil {
		return nil
	}
	return fmt.Errorf("%w: %s: %v", ErrIndex, filepath.Join(s.dir, indexName), err)
}

// indexReady returns the reason the index cannot be used, or nil.
func (s *Store) indexReady() error {
	if s.db == nil {
		return s.indexErr
	}
	return nil
}

func now() string { return time.Now().UTC().Format(time.RFC3339) }
