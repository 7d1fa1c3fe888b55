package kernel

import (
	"bytes"
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestPartAllocatesOnlyWhatTheFileHolds(t *testing.T) {
	// The worked example (329 bytes) with the end offset of record 1 moved
	// to 2^30 bytes after its start: a part check of record 1 used to
	// allocate that gibibyte before finding the file too short.
	b := vector(t, "sieve-3n+1-k4.dcert")
	offsets := len(b) - 15 - 15 - 8 // the third offset: the end of record 1
	start := binary.BigEndian.Uint64(b[offsets-8:])
	binary.BigEndian.PutUint64(b[offsets:], start+1<<30-1)
	root := hashOf(t, referenceRoot(t, vector(t, "sieve-3n+1-k4.dcert")))
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	rep := Part(bytes.NewReader(b), int64(len(b)), Span{I: 1}, root, Options{})
	runtime.ReadMemStats(&after)
	require.ErrorIs(t, rep.Err(), ErrMalformed)
	require.Contains(t, rep.Err().Error(), "file ends inside the record 1")
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(1<<20), "allocated %d bytes", after.TotalAlloc-before.TotalAlloc)

	// A record count far beyond what the file can hold is refused before
	// anything is sized by it.
	b = vector(t, "sieve-3n+1-k4.dcert")
	binary.BigEndian.PutUint32(b[10:], 1<<23+1)
	runtime.GC()
	runtime.ReadMemStats(&before)
	rep = Part(bytes.NewReader(b), int64(len(b)), Span{I: 1}, root, Options{})
	runtime.ReadMemStats(&after)
	require.ErrorIs(t, rep.Err(), ErrMalformed)
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(1<<20), "allocated %d bytes", after.TotalAlloc-before.TotalAlloc)
}

func TestPartOutOfRangeIsTheReadersMistake(t *testing.T) {
	b := vector(t, "sieve-3n+1-k4.dcert")
	root := hashOf(t, referenceRoot(t, b))
	// "-part 2", "-1", "2/2", "1/3" (package check reads the flag).
	for _, part := range []Span{{I: 2}, {I: -1}, {I: 2, N: 2}, {I: 1, N: 3}} {
		rep := Part(bytes.NewReader(b), int64(len(b)), part, root, Options{})
		require.ErrorIs(t, rep.Err(), ErrUsage, part)
		require.Equal(t, ReasonPart, rep.Failure.Reason, part)
		require.NotEmpty(t, rep.Failure.Hint, part)
	}
	rep := Part(bytes.NewReader(b), int64(len(b)), Span{I: 1}, root, Options{})
	require.NoError(t, rep.Err())
}

func TestBudgetRefusesBeforeTheWork(t *testing.T) {
	// The 3n+1 range over [1, 2^20) on a k = 12 sieve: 64 blocks of 2^14
	// numbers, each with a work bound of 2^13 + 2^15 + S (S its sum of
	// stopping times; no cycle or undecided number but n = 1).
	b := vector(t, rangeVector)
	o := Options{Sieve: sieveOf(t, "sieve-3n+1-k12.dcert")}
	rep := checkBytes(b, o)
	require.NoError(t, rep.Err())
	o.Budget = 1 << 20
	rep = checkBytes(b, o)
	require.ErrorIs(t, rep.Err(), ErrLimits)
	require.Equal(t, ReasonLimits, rep.Failure.Reason)
	require.Contains(t, rep.Err().Error(), "more than the budget of 1048576")
	// An audit of one block needs less than the whole.
	o.Draw = func(_ Hash, m int) (*Audit, error) { return &Audit{Blocks: m, Drawn: []int{7}}, nil }
	rep = checkBytes(b, o)
	require.NoError(t, rep.Err())

	// A sieve: E*j + 3*C*X = 46*12 + 3*100000*1 for 3n+1 with j = 12.
	s := vector(t, "sieve-3n+1-k12.dcert")
	rep = checkBytes(s, Options{Budget: 300000})
	require.ErrorIs(t, rep.Err(), ErrLimits)
	rep = checkBytes(s, Options{Budget: 300000 + 46*12})
	require.NoError(t, rep.Err())
}

func TestEveryReasonHasOneClass(t *testing.T) {
	seen := map[string]bool{}
	for _, r := range Reasons {
		require.False(t, seen[r.Code], "%s listed twice", r.Code)
		seen[r.Code] = true
		require.True(t, errors.Is(r.Class, ErrMalformed) || errors.Is(r.Class, ErrInvalid) ||
			errors.Is(r.Class, ErrLimits) || errors.Is(r.Class, ErrUsage), r.Code)
	}
	// The table in SPEC.md lists the same reasons with the same classes.
	spec, err := os.ReadFile(filepath.Join("..", "..", "cert", "SPEC.md"))
	require.NoError(t, err)
	names := map[error]string{ErrMalformed: "malformed", ErrInvalid: "invalid", ErrLimits: "limits", ErrUsage: "usage"}
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	require.NoError(t, err)
	for _, r := range Reasons {
		require.Contains(t, string(spec), "| `"+r.Code+"` | "+names[r.Class]+" |", r.Code)
		require.Contains(t, string(readme), "`"+r.Code+"`", "README lists %s", r.Code)
	}
}

func TestProgressReachesTheEnd(t *testing.T) {
	var last, total int
	o := Options{Progress: func(d, n int) { last, total = d, n }}
	rep := checkBytes(vector(t, "sieve-3n+1-k12.dcert"), o)
	require.NoError(t, rep.Err())
	require.Positive(t, total)
	require.Equal(t, total, last)
	o.Sieve = sieveOf(t, "sieve-3n+1-k12.dcert")
	rep = checkBytes(vector(t, rangeVector), o)
	require.NoError(t, rep.Err())
	require.Equal(t, 64, total, "the blocks of the range")
	require.Equal(t, total, last)
}

func TestRangeOnASieveWithJoins(t *testing.T) {
	// 3n+1 over [1, 2^16) on the k = 8 sieve with joins, with rules: the
	// members above N0 of the joined classes (3, counted here from the
	// sieve's own join sections) are justified by the join.
	b := vector(t, "range-3n+1-k8-joins-to-2^16.dcert")
	rep := checkBytes(b, Options{Sieve: sieveOf(t, "sieve-3n+1-k8-joins.dcert")})
	require.NoError(t, rep.Err())
	sieve, fl := sieveOf(t, "sieve-3n+1-k8-joins.dcert")(rep.File.Range.SieveRoot)
	require.Nil(t, fl)
	var joined []uint64
	for r := range uint64(1 << 8) {
		if sieve.Joined(r) {
			joined = append(joined, r)
		}
	}
	require.Len(t, joined, 3)
	// Each joined class mod 2^8 has 2^8 members in [1, 2^16), less those
	// at or below N0 (46 for 3n+1 with k = 8: s = 5 odd steps close at
	// t = 8, floor(5*243/(2*13)) = 46), none here: the joined residues lie
	// above it.
	require.Equal(t, "768", rep.File.Range.Totals.Counts[CJoin].String())
}
