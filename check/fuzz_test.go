package check

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// FuzzCheck: the checker never panics, and what it says is consistent:
// a valid report has no failure, a failure has a known reason and class,
// and the report always encodes as JSON.
//
//	go test ./check -run '^$' -fuzz FuzzCheck -fuzztime 10m -fuzzminimizetime 5s
func FuzzCheck(f *testing.F) {
	names, err := filepath.Glob(filepath.Join("..", "testdata", "*.dcert"))
	if err != nil || len(names) == 0 {
		f.Fatal("no seed certificates in testdata")
	}
	for _, n := range names {
		b, err := os.ReadFile(n)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	sieve := filepath.Join("..", "testdata", "sieve-3n+1-k12.dcert")
	f.Fuzz(func(t *testing.T, b []byte) {
		rep := Check(bytes.NewReader(b), Options{Sieve: sieve, Workers: 1})
		if err := rep.Err(); rep.Valid != (err == nil) {
			t.Fatalf("valid = %v with error %v", rep.Valid, err)
		} else if err != nil {
			if _, ok := Reasons[rep.Reason]; !ok {
				t.Fatalf("unknown reason %q: %v", rep.Reason, err)
			}
			if !errors.Is(err, ErrMalformed) && !errors.Is(err, ErrInvalid) && !errors.Is(err, ErrLimits) {
				t.Fatalf("failure of no class: %v", err)
			}
		}
		if _, err := json.Marshal(rep); err != nil {
			t.Fatalf("the report does not encode: %v", err)
		}
		if rep.Valid {
			if _, err := Decode(bytes.NewReader(b)); err != nil {
				t.Fatalf("valid, but the decoder rejects it: %v", err)
			}
		}
	})
}
