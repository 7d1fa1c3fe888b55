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
	rep := checkBytes(b, Options{Sieve: sieveOf(t, "sieve-3n+1-k12.dcert"), Sample: 5, Seed: "reviewer"})
	require.NoError(t, rep.Err())
	require.Equal(t, &Audit{Blocks: 64, Drawn: rep.Audit.Drawn, Seed: "reviewer", SeedFrom: "reader"}, rep.Audit)
	require.Len(t, rep.Audit.Drawn, 5)
	require.Equal(t, ModeAudit, rep.Mode)

	// The blocks chosen depend on the root and the seed, and nothing else.
	root := Hash{1, 2, 3}
	require.Equal(t, AuditDraw(root, "a", 64, 5), AuditDraw(root, "a", 64, 5))
	require.NotEqual(t, AuditDraw(root, "a", 64, 5), AuditDraw(root, "b", 64, 5))
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
