package kernel

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// FuzzCheck: the kernel never panics, and what it says is consistent:
// a failure has a known reason of its class, and a valid certificate
// decodes. The budget is small
// (fuzzBudget steps), so that a mutated header that claims much work is
// refused as beyond limits at once rather than holding the fuzzer.
//
//	go test ./check/kernel -run '^$' -fuzz FuzzCheck -fuzztime 10m -fuzzminimizetime 5s
const fuzzBudget = 1 << 22

func FuzzCheck(f *testing.F) {
	addSeeds(f)
	sieve := sieveOf(f, "sieve-3n+1-k12.dcert")
	f.Fuzz(func(t *testing.T, b []byte) {
		rep := checkBytes(b, Options{Sieve: sieve, Budget: fuzzBudget})
		if err := rep.Err(); err != nil {
			r, ok := LookupReason(rep.Failure.Reason)
			if !ok {
				t.Fatalf("unknown reason %q: %v", rep.Failure.Reason, err)
			}
			if !errors.Is(err, r.Class) {
				t.Fatalf("reason %q of class %v, but the failure is not of it: %v", r.Code, r.Class, err)
			}
		} else if _, err := Decode(bytes.NewReader(b)); err != nil {
			t.Fatalf("valid, but the decoder rejects it: %v", err)
		}
	})
}

// addSeeds adds the certificates in testdata to a fuzz target's corpus.
func addSeeds(f *testing.F) {
	names, err := filepath.Glob(filepath.Join("..", "..", "testdata", "*.dcert"))
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
}
