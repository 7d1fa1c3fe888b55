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
// a valid report has no failure, a failure has a known reason of its
// class, and the report always encodes as JSON. The budget is small
// (fuzzBudget steps), so that a mutated header that claims much work is
// refused as beyond limits at once rather than holding the fuzzer.
//
//	go test ./check -run '^$' -fuzz FuzzCheck -fuzztime 10m -fuzzminimizetime 5s
const fuzzBudget = 1 << 22

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
		rep := Check(bytes.NewReader(b), Options{Sieve: sieve, Workers: 1, Budget: fuzzBudget})
		if err := rep.Err(); rep.Valid != (err == nil) {
			t.Fatalf("valid = %v with error %v", rep.Valid, err)
		} else if err != nil {
			class := ClassOf(rep.Reason)
			if class == nil {
				t.Fatalf("unknown reason %q: %v", rep.Reason, err)
			}
			if !errors.Is(err, class) {
				t.Fatalf("reason %q of class %v, but the failure is not of it: %v", rep.Reason, class, err)
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
