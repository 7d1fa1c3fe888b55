package kernel

import (
	"bytes"
	"errors"
	"testing"

	"github.com/stretchr/testify/require"
)

const rangeVector = "range-3n+1-k12-to-2^20.dcert"

func TestRangeVectors(t *testing.T) {
	rep := checkBytes(vector(t, rangeVector), Options{Sieve: sieveOf(t, "sieve-3n+1-k12.dcert")})
	require.NoError(t, rep.Err())
	// OEIS A060412: the stopping-time records below 2^20.
	var recs []string
	for _, r := range rep.File.Range.Totals.Records {
		recs = append(recs, r.N.String())
	}
	require.Equal(t, []string{"2", "3", "7", "27", "703", "10087", "35655", "270271", "362343", "381727", "626331", "1027431"}, recs)
	cycles := rep.File.Range.Totals.Cycles
	require.Len(t, cycles, 1)
	require.Equal(t, "1 1", cycles[0].Min.String()+" "+cycles[0].Count.String())

	// From memory: 3n-1 has cycles through 1, 5 and 17.
	rep = checkBytes(vector(t, "range-3n-1-k12-to-10^5.dcert"), Options{Sieve: sieveOf(t, "sieve-3n-1-k12.dcert")})
	require.NoError(t, rep.Err())
	require.Len(t, rep.File.Range.Totals.Cycles, 3)
	for i, m := range []int64{1, 5, 17} {
		require.Equal(t, m, rep.File.Range.Totals.Cycles[i].Min.Int64())
	}
}

func TestRangeNeedsItsSieve(t *testing.T) {
	b := vector(t, rangeVector)
	// Without its sieve, or with another one: the reader's mistake, not
	// a fault of the certificate.
	rep := checkBytes(b, Options{})
	require.ErrorIs(t, rep.Err(), ErrUsage)
	require.Equal(t, ReasonSieveMissing, rep.Failure.Reason)
	require.Contains(t, rep.Failure.Hint, "-sieve FILE")

	rep = checkBytes(b, Options{Sieve: sieveOf(t, "sieve-3n+1-k10.dcert")})
	require.ErrorIs(t, rep.Err(), ErrUsage)
	require.Equal(t, ReasonSieveMismatch, rep.Failure.Reason)
}

func TestRangeAudit(t *testing.T) {
	b := vector(t, rangeVector)
	// The draw (package check's) is given the root and the 64 blocks, and
	// the kernel re-derives the blocks drawn, by index in the file.
	var gotRoot Hash
	draw := func(root Hash, m int) (*Audit, error) {
		gotRoot = root
		return &Audit{Blocks: m, Drawn: []int{5, m - 1, 0}, Seed: "reviewer", SeedFrom: "reader"}, nil
	}
	rep := checkBytes(b, Options{Sieve: sieveOf(t, "sieve-3n+1-k12.dcert"), Draw: draw})
	require.NoError(t, rep.Err())
	require.Equal(t, &Audit{Blocks: 64, Drawn: []int{5, 63, 0}, Seed: "reviewer", SeedFrom: "reader"}, rep.Audit)
	require.Equal(t, *rep.Root, gotRoot)
	require.Equal(t, ModeAudit, rep.Mode)
	// A share of a range: the draw is among the share's blocks, named by
	// index in the file.
	rep = checkBytes(b, Options{Sieve: sieveOf(t, "sieve-3n+1-k12.dcert"), Draw: draw, Span: &Span{I: 1, N: 2}})
	require.NoError(t, rep.Err())
	require.Equal(t, &Audit{Blocks: 32, Drawn: []int{37, 63, 32}, Seed: "reviewer", SeedFrom: "reader"}, rep.Audit)
}

func TestEveryBitFlipOfARangeIsRejected(t *testing.T) {
	good := vector(t, "range-3n-1-k12-to-10^5.dcert")
	o := Options{Sieve: sieveOf(t, "sieve-3n-1-k12.dcert")}
	for i := range len(good) * 8 {
		if testing.Short() && i%16 != 0 {
			continue
		}
		bad := bytes.Clone(good)
		bad[i/8] ^= 0x80 >> (i % 8)
		rep := checkBytes(bad, o)
		err := rep.Err()
		require.Error(t, err, "bit %d of byte %d flipped: accepted", i%8, i/8)
		require.True(t, errors.Is(err, ErrInvalid) || errors.Is(err, ErrMalformed), "bit %d: %v", i, err)
	}
}
