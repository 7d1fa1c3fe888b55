package kernel

import (
	"bytes"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"math/big"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	"github.com/stretchr/testify/require"
	"golang.org/x/crypto/blake2b"
)

func vector(t testing.TB, name string) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", name))
	require.NoError(t, err)
	return b
}

var valid = []string{"sieve-3n+1-k4.dcert", "sieve-3n+1-k10.dcert", "sieve-5n+1-k16.dcert", "sieve-3n-1-k12.dcert"}

func hashOf(t testing.TB, s string) Hash {
	b, err := hex.DecodeString(s)
	require.NoError(t, err)
	require.Len(t, b, 32)
	return Hash(b)
}

// checkBytes runs the kernel on a certificate in memory.
func checkBytes(b []byte, o Options) *Result { return Check(bytes.NewReader(b), int64(len(b)), o) }

// sieveOf gives a range check the committed sieve certificate name.
func sieveOf(t testing.TB, name string) func(Hash) (*Sieve, *Failure) {
	b := vector(t, name)
	return func(named Hash) (*Sieve, *Failure) {
		return RangeSieve(bytes.NewReader(b), int64(len(b)), name, named, Options{})
	}
}

func TestValidVectors(t *testing.T) {
	for _, name := range valid {
		b := vector(t, name)
		rep := checkBytes(b, Options{})
		require.NoError(t, rep.Err(), name)
		sv, fl := RangeSieve(bytes.NewReader(b), int64(len(b)), name, *rep.Root, Options{})
		require.Nil(t, fl, name)
		require.Equal(t, *rep.Root, sv.Root, name)
	}
}

// referenceRoot computes the root of a certificate file from its layout
// (SPEC.md, section 2) with BLAKE2b and the recursive Merkle tree hash of
// RFC 6962, written out here rather than taken from the checker.
func referenceRoot(t *testing.T, file []byte) string {
	records := int(binary.BigEndian.Uint32(file[10:]))
	header := file[:18+int(binary.BigEndian.Uint32(file[14:]))]
	tree := 0
	for n := records + 1; ; n = (n + 1) / 2 {
		tree += n
		if n == 1 {
			break
		}
	}
	offs := len(header) + 32*tree
	leaves := [][]byte{header}
	for i := 0; i < records; i++ {
		a := binary.BigEndian.Uint64(file[offs+8*i:])
		b := binary.BigEndian.Uint64(file[offs+8*i+8:])
		leaves = append(leaves, file[a:b])
	}
	var mth func(d [][]byte) [32]byte
	mth = func(d [][]byte) [32]byte {
		if len(d) == 1 {
			return blake2b.Sum256(append([]byte{0}, d[0]...))
		}
		k := 1
		for 2*k < len(d) {
			k *= 2
		}
		l, r := mth(d[:k]), mth(d[k:])
		return blake2b.Sum256(append(append([]byte{1}, l[:]...), r[:]...))
	}
	h := mth(leaves)
	return hex.EncodeToString(h[:])
}

func TestWorkedExampleRoot(t *testing.T) {
	rep := checkBytes(vector(t, "sieve-3n+1-k4.dcert"), Options{})
	require.Equal(t, referenceRoot(t, vector(t, "sieve-3n+1-k4.dcert")), rep.Root.String())
	for _, name := range valid {
		require.Equal(t, referenceRoot(t, vector(t, name)), checkBytes(vector(t, name), Options{}).Root.String(), name)
	}
	// SPEC.md, section 5: 3 survivors, one class closing at steps 1, 2 and 4.
	require.EqualValues(t, 3, rep.File.Sieve.Survivors)
	require.Equal(t, []uint64{1, 1, 0, 1}, rep.File.Sieve.ClosedAt)

	root := hashOf(t, rep.Root.String())
	require.NoError(t, checkBytes(vector(t, "sieve-3n+1-k4.dcert"), Options{Root: &root}).Err())
	root[0] ^= 1
	rep = checkBytes(vector(t, "sieve-3n+1-k4.dcert"), Options{Root: &root})
	require.ErrorIs(t, rep.Err(), ErrInvalid)
	require.Equal(t, "root", rep.Failure.Reason)
}

func TestEverySingleBitFlipIsRejected(t *testing.T) {
	good := vector(t, "sieve-3n+1-k10.dcert")
	for i := range len(good) * 8 {
		bad := bytes.Clone(good)
		bad[i/8] ^= 0x80 >> (i % 8)
		err := checkBytes(bad, Options{}).Err()
		require.Error(t, err, "bit %d of byte %d flipped: accepted", i%8, i/8)
		require.True(t, errors.Is(err, ErrInvalid) || errors.Is(err, ErrMalformed), "bit %d: %v", i, err)
	}
}

func malformedAt(t *testing.T, b []byte, what string) *Result {
	t.Helper()
	rep := checkBytes(b, Options{})
	require.ErrorIs(t, rep.Err(), ErrMalformed, what)
	require.Contains(t, rep.Err().Error(), "offset", what)
	return rep
}

func TestTruncatedAtEveryLength(t *testing.T) {
	good := vector(t, "sieve-3n+1-k10.dcert")
	for n := range len(good) {
		malformedAt(t, good[:n], "truncated")
	}
}

func TestBadPreamble(t *testing.T) {
	good := vector(t, "sieve-3n+1-k4.dcert")
	for _, c := range []struct {
		name   string
		edit   func(b []byte) []byte
		reason string
	}{
		{"wrong magic", func(b []byte) []byte { b[0] = 'D'; return b }, "not a descent certificate"},
		{"unknown version", func(b []byte) []byte { b[8] = 3; return b }, "unknown format version 3"},
		{"format version 1", func(b []byte) []byte { b[8] = 1; return b }, "version 1 is an older format"},
		{"unknown kind", func(b []byte) []byte { b[9] = 'x'; return b }, "unknown certificate kind"},
		{"trailing bytes", func(b []byte) []byte { return append(b, 0) }, "follow the last record"},
		{"leading garbage", func(b []byte) []byte { return append([]byte{0}, b...) }, "not a descent certificate"},
		{"header longer than the file", func(b []byte) []byte { binary.BigEndian.PutUint32(b[14:], 1<<20); return b }, "file ends inside the header"},
		{"header over the cap", func(b []byte) []byte { binary.BigEndian.PutUint32(b[14:], 1<<20+1); return b }, "over the cap"},
	} {
		rep := malformedAt(t, c.edit(bytes.Clone(good)), c.name)
		require.Contains(t, rep.Err().Error(), c.reason, c.name)
	}
}

// handHeader builds a sieve header for 3n+1 byte by byte, from SPEC.md.
func handHeader(records uint32, k, j int) []byte {
	body := binary.BigEndian.AppendUint32(nil, 3)
	body = binary.BigEndian.AppendUint32(body, 1)
	body = append(body, byte(k), byte(j))
	body = binary.BigEndian.AppendUint32(body, 100000)
	body = binary.BigEndian.AppendUint16(body, 128)
	body = binary.BigEndian.AppendUint64(body, 1)
	body = append(body, make([]byte, 8*j)...)
	body = binary.BigEndian.AppendUint32(body, 0)
	b := append([]byte(magic), version, kindSieve)
	b = binary.BigEndian.AppendUint32(b, records)
	b = binary.BigEndian.AppendUint32(b, uint32(len(body)))
	return append(b, body...)
}

func TestLengthsBeyondTheFileAllocateLittle(t *testing.T) {
	// A 1 KiB file whose preamble declares 2^23+1 records (the most a
	// sieve may have) claims a stored tree of 2^24 hashes (512 MiB);
	// reading it must fail at the end of the file, naming the offset,
	// without allocating anywhere near that.
	b := handHeader(1<<23+1, 64, 64)
	b = append(b, make([]byte, 1024-len(b))...)
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	rep := checkBytes(b, Options{})
	runtime.ReadMemStats(&after)
	require.ErrorIs(t, rep.Err(), ErrMalformed)
	require.Contains(t, rep.Err().Error(), "offset 1024")
	require.Contains(t, rep.Err().Error(), "file ends inside the stored tree")
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(1<<20), "allocated %d bytes", after.TotalAlloc-before.TotalAlloc)
}

func TestFatesByTheCheckersOwnArithmetic(t *testing.T) {
	p := NewParams(Map{3, 1}, 8)
	// OEIS A126241: under T, 27 first drops below itself after 59 steps.
	e := p.Fate(big.NewInt(27), 1000, 128, nil)
	require.Equal(t, byte(Descends), e.Kind)
	require.EqualValues(t, 59, e.Steps)
	// From memory: 5n+1 has cycles through 13 (13, 33, 83, 208, 104, 52,
	// 26) and 17 (17, 43, 108, 54, 27, 68, 34).
	p = NewParams(Map{5, 1}, 8)
	for _, n := range []int64{1, 13, 17} {
		e := p.Fate(big.NewInt(n), 1000, 128, nil)
		require.Equal(t, byte(Cycle), e.Kind, "n = %d", n)
		require.Equal(t, n, e.CycleMin.Int64())
	}
	// 5n+1, n = 7: believed to diverge; within the cap it is undecided.
	require.Equal(t, byte(Undecided), p.Fate(big.NewInt(7), 1000, 128, nil).Kind)
}

func TestFateStopsAtTheCeiling(t *testing.T) {
	// An orbit of 5n+1 grows by about log2(5/4)/2 = 0.16 bits per step on
	// average (half the steps multiply by about 5/2, half halve; common
	// practice, no source), so from 7 it passes 2^128 within about 800
	// steps: with W = 128 and a cap of 2^24 the fate rule stops there,
	// undecided, after that many steps, not 2^24.
	p := NewParams(Map{5, 1}, 8)
	m := NewMeter(big.NewInt(1 << 24))
	require.Equal(t, byte(Undecided), p.Fate(big.NewInt(7), 1<<24, 128, m).Kind)
	used := 1<<24 - m.left.Load()
	require.Less(t, used, int64(5000), "steps taken before the ceiling")
	// The same orbit under a ceiling of 8192 bits runs longer, but still
	// stops far before the cap.
	m = NewMeter(big.NewInt(1 << 24))
	require.Equal(t, byte(Undecided), p.Fate(big.NewInt(7), 1<<24, 8192, m).Kind)
	require.Greater(t, 1<<24-m.left.Load(), used)
}
