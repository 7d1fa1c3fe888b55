package check

import (
	"bytes"
	"errors"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

const rangeVector = "range-3n+1-k12-to-2^20.dcert"

func sievePath(name string) string { return filepath.Join("..", "testdata", name) }

func TestRangeVectors(t *testing.T) {
	rep := Check(bytes.NewReader(vector(t, rangeVector)), Options{Sieve: sievePath("sieve-3n+1-k12.dcert")})
	require.NoError(t, rep.Err())
	// OEIS A060412: the stopping-time records below 2^20.
	var recs []string
	for _, r := range rep.Records {
		recs = append(recs, string(r.N))
	}
	require.Equal(t, []string{"2", "3", "7", "27", "703", "10087", "35655", "270271", "362343", "381727", "626331", "1027431"}, recs)
	require.Equal(t, []CycleReport{{Min: "1", Count: "1"}}, rep.Cycles)

	// From memory: 3n-1 has cycles through 1, 5 and 17.
	rep = Check(bytes.NewReader(vector(t, "range-3n-1-k12-to-10^5.dcert")), Options{Sieve: sievePath("sieve-3n-1-k12.dcert")})
	require.NoError(t, rep.Err())
	require.Len(t, rep.Cycles, 3)
	for i, m := range []Num{"1", "5", "17"} {
		require.Equal(t, m, rep.Cycles[i].Min)
	}
}

func TestRangeNeedsItsSieve(t *testing.T) {
	b := vector(t, rangeVector)
	// Without its sieve, or with another one: the reader's mistake, not
	// a fault of the certificate.
	rep := Check(bytes.NewReader(b), Options{})
	require.ErrorIs(t, rep.Err(), ErrUsage)
	require.Equal(t, ReasonSieveMissing, rep.Reason)
	require.Contains(t, rep.Hint, "-sieve FILE")

	rep = Check(bytes.NewReader(b), Options{Sieve: sievePath("sieve-3n+1-k10.dcert")})
	require.ErrorIs(t, rep.Err(), ErrUsage)
	require.Equal(t, ReasonSieveMismatch, rep.Reason)
}

func TestRangeAudit(t *testing.T) {
	b := vector(t, rangeVector)
	rep := Check(bytes.NewReader(b), Options{Sieve: sievePath("sieve-3n+1-k12.dcert"), Sample: 5, Seed: "reviewer"})
	require.NoError(t, rep.Err())
	require.Equal(t, &Audit{Blocks: 64, Audited: 5, Seed: "reviewer", SeedFrom: "reader", PassIfWrong: rep.Audit.PassIfWrong}, rep.Audit)
	require.Equal(t, ModeAudit, rep.Mode)
	// 10% of 64 blocks: 7 wrong; the chance that 5 draws without
	// replacement miss all of them is C(57,5)/C(64,5).
	p := 1.0
	for i := 0; i < 5; i++ {
		p *= float64(57-i) / float64(64-i)
	}
	// 0.1% and 1% of 64 blocks are both 1 block: one line for both.
	require.Len(t, rep.Audit.PassIfWrong, 2)
	require.Equal(t, 1, rep.Audit.PassIfWrong[0].WrongBlocks)
	require.InDelta(t, p, rep.Audit.PassIfWrong[1].Pass, 1e-12)
	require.Equal(t, 7, rep.Audit.PassIfWrong[1].WrongBlocks)

	// The blocks chosen depend on the root and the seed, and nothing else.
	root := [hashLen]byte{1, 2, 3}
	require.Equal(t, sample(root, "a", 64, 5), sample(root, "a", 64, 5))
	require.NotEqual(t, sample(root, "a", 64, 5), sample(root, "b", 64, 5))
}

func TestEveryBitFlipOfARangeIsRejected(t *testing.T) {
	good := vector(t, "range-3n-1-k12-to-10^5.dcert")
	o := Options{Sieve: sievePath("sieve-3n-1-k12.dcert")}
	for i := range len(good) * 8 {
		bad := bytes.Clone(good)
		bad[i/8] ^= 0x80 >> (i % 8)
		rep := Check(bytes.NewReader(bad), o)
		err := rep.Err()
		require.Error(t, err, "bit %d of byte %d flipped: accepted", i%8, i/8)
		require.True(t, errors.Is(err, ErrInvalid) || errors.Is(err, ErrMalformed), "bit %d: %v", i, err)
	}
}
