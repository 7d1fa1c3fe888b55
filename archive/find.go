package archive

import (
	"fmt"
	"strings"
)

// Query selects entries; empty fields select everything.
type Query struct {
	Map  string // "3n+1", as the verdicts write maps
	Kind string // one of Kinds
	// Covers, a positive decimal, selects the certificates over a range of
	// numbers that contains it: lo <= Covers < hi.
	Covers string
}

// Find returns the stored entries that match q, sieves first, then by map
// and by range.
func (s *Store) Find(q Query) ([]Entry, error) {
	if err := s.indexReady(); err != nil {
		return nil, err
	}
	var where []string
	args := []any{}
	if q.Map != "" {
		where, args = append(where, "map = ?"), append(args, q.Map)
	}
	if q.Kind != "" {
		if !knownKind(q.Kind) {
			return nil, fmt.Errorf("no kind %q: an archive holds %s", q.Kind, strings.Join(Kinds, ", "))
		}
		where, args = append(where, "kind = ?"), append(args, q.Kind)
	}
	if q.Covers != "" {
		if !decimal.MatchString(q.Covers) {
			return nil, fmt.Errorf("-covers %q: want a positive decimal", q.Covers)
		}
		where = append(where, "lo_key IS NOT NULL", "lo_key <= ?", "hi_key > ?")
		args = append(args, numKey(q.Covers), numKey(q.Covers))
	}
	sql := `SELECT ` + entryColumns + ` FROM archived`
	if len(where) > 0 {
		sql += " WHERE " + strings.Join(where, " AND ")
	}
	sql += ` ORDER BY kind <> 'sieve', kind, map, lo_key, root`
	rows, err := s.db.Query(sql, args...)
	if err != nil {
		return nil, s.damaged(err)
	}
	es, err := scanEntries(rows)
	return es, s.damaged(err)
}
