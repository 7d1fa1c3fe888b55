package cert_test

import (
	"bytes"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math/big"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/stretchr/testify/require"
	"golang.org/x/crypto/blake2b"

	"descent/cert"
	"descent/internal/certtest"
)

// mth is the Merkle tree hash of RFC 6962, section 2.1, written from the
// RFC's recursive definition, as a reference for the level-by-level tree.
func mth(leaves [][]byte) [32]byte {
	if len(leaves) == 1 {
		return blake2b.Sum256(append([]byte{0}, leaves[0]...))
	}
	k := 1
	for k*2 < len(leaves) {
		k *= 2
	}
	l, r := mth(leaves[:k]), mth(leaves[k:])
	return blake2b.Sum256(append(append([]byte{1}, l[:]...), r[:]...))
}

func TestTreeIsRFC6962(t *testing.T) {
	for n := 1; n <= 70; n++ {
		var data [][]byte
		var leaves []cert.Hash
		for i := range n {
			d := []byte{byte(i), byte(n)}
			data = append(data, d)
			leaves = append(leaves, cert.LeafHash(d))
		}
		levels := cert.Levels(leaves)
		root := levels[len(levels)-1][0]
		require.Equal(t, mth(data), [32]byte(root), "n = %d", n)
		for i := range n {
			path := cert.AuditPath(levels, i)
			require.Len(t, path, cert.AuditPathLen(i, n))
			require.NoError(t, cert.VerifyAuditPath(leaves[i], i, n, path, root))
			if len(path) > 0 {
				bad := append([]cert.Hash(nil), path...)
				bad[0][3] ^= 1
				require.ErrorIs(t, cert.VerifyAuditPath(leaves[i], i, n, bad, root), cert.ErrAuditPath)
				require.Error(t, cert.VerifyAuditPath(leaves[i], i, n, path[1:], root), "short path")
			}
			if n > 1 {
				require.Error(t, cert.VerifyAuditPath(leaves[i], (i+1)%n, n, path, root), "wrong index")
			}
		}
	}
}

func TestBitWriter(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	var w cert.BitWriter
	var want strings.Builder
	for range 2000 {
		n := uint(rng.IntN(65))
		x := rng.Uint64()
		w.WriteBits(x, n)
		for i := int(n) - 1; i >= 0; i-- {
			want.WriteByte('0' + byte(x>>i&1))
		}
	}
	var got strings.Builder
	for _, b := range w.Bytes() {
		for i := 7; i >= 0; i-- {
			got.WriteByte('0' + b>>i&1)
		}
	}
	require.EqualValues(t, want.Len(), w.Len())
	require.Equal(t, want.String(), got.String()[:want.Len()])
	require.Equal(t, strings.Repeat("0", got.Len()-want.Len()), got.String()[want.Len():], "padding")

	var w2 cert.BitWriter
	w2.WriteBits(1, 3)
	w2.AppendString(w.Words(), uint(w.Len()))
	require.Equal(t, "001"+want.String(), bits(w2.Bytes())[:3+want.Len()])
}

func bits(b []byte) string {
	var s strings.Builder
	for _, x := range b {
		for i := 7; i >= 0; i-- {
			s.WriteByte('0' + x>>i&1)
		}
	}
	return s.String()
}

func header() *cert.SieveHeader {
	return &cert.SieveHeader{Map: cert.Map{A: 5, B: 1}, K: 9, J: 8, Cap: 50, Ceiling: 400, Chunks: 3, Survivors: 40,
		ClosedAt: []uint64{1, 0, 1, 0, 2, 0, 5, 0},
		Exceptions: []cert.Exception{
			{N: big.NewInt(1), Fate: cert.Cycle, CycleMin: big.NewInt(1)},
			{N: big.NewInt(3), Fate: cert.Descends, Steps: 3},
			{N: new(big.Int).Lsh(big.NewInt(1), 300), Fate: cert.Undecided},
		}}
}

func TestHeaderRoundTrip(t *testing.T) {
	b, err := header().Marshal()
	require.NoError(t, err)
	h, err := cert.ParseSieveHeader(b)
	require.NoError(t, err)
	require.Empty(t, cmp.Diff(header(), h, cmp.Comparer(func(x, y *big.Int) bool { return x.Cmp(y) == 0 })))
	again, err := h.Marshal()
	require.NoError(t, err)
	require.Equal(t, b, again)
}

func TestHeaderRejectsWhatIsNotCanonical(t *testing.T) {
	for _, c := range []struct {
		name string
		edit func(*cert.SieveHeader)
	}{
		{"even multiplier", func(h *cert.SieveHeader) { h.Map.A = 4 }},
		{"even constant", func(h *cert.SieveHeader) { h.Map.B = 2 }},
		{"constant too negative", func(h *cert.SieveHeader) { h.Map.B = -5 }},
		{"j above k", func(h *cert.SieveHeader) { h.J = 10; h.ClosedAt = make([]uint64, 10) }},
		{"unordered exceptions", func(h *cert.SieveHeader) { h.Exceptions[0], h.Exceptions[1] = h.Exceptions[1], h.Exceptions[0] }},
		{"descent beyond the cap", func(h *cert.SieveHeader) { h.Exceptions[1].Steps = 51 }},
		{"cycle below n", func(h *cert.SieveHeader) { h.Exceptions[0].N = big.NewInt(2) }},
		{"cap zero", func(h *cert.SieveHeader) { h.Cap = 0 }},
		{"ceiling below 128 bits", func(h *cert.SieveHeader) { h.Ceiling = 127 }},
		{"ceiling above 8192 bits", func(h *cert.SieveHeader) { h.Ceiling = 8193 }},
		{"too many chunks", func(h *cert.SieveHeader) { h.Chunks = 18 }},
	} {
		h := header()
		c.edit(h)
		_, err := h.Marshal()
		require.Error(t, err, c.name)
	}
	good, err := header().Marshal()
	require.NoError(t, err)
	// A natural with a leading zero byte: rewrite n = 1 (01 01) as 02 00 01.
	i := bytes.Index(good, []byte{1, 1, 2, 1, 1})
	require.Positive(t, i)
	bad := append(append(append([]byte(nil), good[:i]...), 2, 0), good[i+1:]...)
	bad[17]++ // the body length
	_, err = cert.ParseSieveHeader(bad)
	require.ErrorIs(t, err, cert.ErrMalformed)
	require.Contains(t, err.Error(), "leading zero")
	for n := range len(good) {
		_, err := cert.ParseSieveHeader(good[:n])
		require.ErrorIs(t, err, cert.ErrMalformed, "truncated to %d bytes", n)
	}
}

func TestParseMap(t *testing.T) {
	for s, want := range map[string]cert.Map{"3n+1": {3, 1}, "3n-1": {3, -1}, "5n+1": {5, 1}, "3n+5": {3, 5}, " 7n + 3 ": {7, 3}} {
		m, err := cert.ParseMap(s)
		require.NoError(t, err, s)
		require.Equal(t, want, m)
		again, err := cert.ParseMap(m.String())
		require.NoError(t, err)
		require.Equal(t, m, again)
	}
	for _, s := range []string{"", "n+1", "3n", "3n+", "4n+1", "3n+2", "3n-3", "3x+1", "3n++1", "1n+1", "99999999999n+1"} {
		_, err := cert.ParseMap(s)
		require.Error(t, err, s)
	}
}

func TestWorkedExampleHexInSpec(t *testing.T) {
	// The hex dump in SPEC.md, section 5, is the file in testdata.
	spec, err := os.ReadFile("SPEC.md")
	require.NoError(t, err)
	m := regexp.MustCompile(`(?s)<!-- hex:sieve-3n\+1-k4 -->\n(.*?)<!-- end hex -->`).FindSubmatch(spec)
	require.NotNil(t, m, "no hex dump in SPEC.md")
	var dump []byte
	for _, line := range strings.Split(strings.TrimSpace(string(m[1])), "\n") {
		// "OFFSET: hex groups  annotation", as xxd prints it.
		_, rest, ok := strings.Cut(line, ": ")
		require.True(t, ok, line)
		groups, _, _ := strings.Cut(rest, "  ")
		b, err := hex.DecodeString(strings.ReplaceAll(groups, " ", ""))
		require.NoError(t, err, line)
		dump = append(dump, b...)
	}
	file, err := os.ReadFile(filepath.Join("..", "testdata", "sieve-3n+1-k4.dcert"))
	require.NoError(t, err)
	require.Equal(t, file, dump)
	// The hashes printed below the dump are those of the dump's header
	// (83 bytes) and records (offsets 299, 314, 329), by the reference mth.
	header, top, stub := dump[:83], dump[299:314], dump[314:329]
	leaf := func(b []byte) [32]byte { return mth([][]byte{b}) }
	for label, h := range map[string][32]byte{
		"leaf 0 (header)":     leaf(header),
		"leaf 1 (top chunk)":  leaf(top),
		"leaf 2 (stub chunk)": leaf(stub),
		"inner(leaf 0, 1)":    mth([][]byte{header, top}),
		"root":                mth([][]byte{header, top, stub}),
	} {
		line := regexp.MustCompile(regexp.QuoteMeta(label) + ` +([0-9a-f]{64})`).FindSubmatch(spec)
		require.NotNil(t, line, label)
		require.Equal(t, hex.EncodeToString(h[:]), string(line[1]), label)
	}
}

// seeds are the certificates in testdata, sieves and ranges.
func seeds(f *testing.F) [][]byte {
	names, err := filepath.Glob(filepath.Join("..", "testdata", "*.dcert"))
	if err != nil || len(names) == 0 {
		f.Fatal("no seed certificates in testdata")
	}
	var out [][]byte
	for _, n := range names {
		b, err := os.ReadFile(n)
		if err != nil {
			f.Fatal(err)
		}
		out = append(out, b)
	}
	return out
}

// encodeWithCert writes a decoded certificate back with package cert. A
// stored tree that does not agree with itself is not a second encoding of
// the same claims but a hash failure (a checker's "tree"), so it is
// refused here.
func encodeWithCert(b []byte) ([]byte, error) {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil, err
	}
	if err := rd.CheckTree(); err != nil {
		return nil, err
	}
	var header []byte
	var recs [][]byte
	kind := rd.Kind
	if kind == cert.KindShard {
		sh, err := cert.ParseShardHeader(rd.Header)
		if err != nil {
			return nil, err
		}
		if header, err = sh.Marshal(); err != nil {
			return nil, err
		}
		kind = sh.Whole
	}
	switch kind {
	case cert.KindSieve, cert.KindJoins:
		if header == nil {
			h, err := cert.ParseSieveHeader(rd.Header)
			if err != nil {
				return nil, err
			}
			if header, err = h.Marshal(); err != nil {
				return nil, err
			}
		}
		for {
			rec, err := rd.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return nil, err
			}
			if kind == cert.KindSieve {
				c, err := cert.ParseChunk(rec, 0)
				if err != nil {
					return nil, err
				}
				recs = append(recs, c.Marshal())
				continue
			}
			c, rest, err := cert.ParseChunkJoins(rec, 0)
			if err != nil {
				return nil, err
			}
			out := c.Marshal()
			if len(recs) == 0 && len(rest) > 0 {
				return nil, fmt.Errorf("the top chunk has %d bytes after its codes", len(rest))
			}
			if len(recs) > 0 {
				open, err := c.Open()
				if err != nil {
					return nil, err
				}
				j, err := cert.ParseJoins(rest, open, 0)
				if err != nil {
					return nil, err
				}
				out = cert.AppendJoins(out, j)
			}
			recs = append(recs, out)
		}
	case cert.KindRange:
		rh, err := cert.ParseRangeHeader(rd.Header)
		if kind != rd.Kind {
			sh, _ := cert.ParseShardHeader(rd.Header)
			rh, err = cert.ParseRangeHeader(sh.WholeHeader)
		}
		if err != nil {
			return nil, err
		}
		if header == nil {
			if header, err = rh.Marshal(); err != nil {
				return nil, err
			}
		}
		for {
			rec, err := rd.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return nil, err
			}
			blk, err := cert.ParseBlock(rec, 0, len(rh.Rules))
			if err != nil {
				return nil, err
			}
			out, err := blk.Marshal()
			if err != nil {
				return nil, err
			}
			recs = append(recs, out)
		}
	}
	var f certtest.MemFile
	w, err := cert.NewWriter(&f, header)
	if err != nil {
		return nil, err
	}
	// The stored hashes are copied, not recomputed: a round trip must give
	// back the bytes even of a certificate whose hashes are wrong.
	for i, r := range recs {
		if err := w.WriteRecord(r, rd.Levels[0][i+1]); err != nil {
			return nil, err
		}
	}
	if _, _, err := w.Close(); err != nil {
		return nil, err
	}
	return f.B, nil
}

// FuzzRoundTrip: what package cert accepts, it writes back byte for byte,
// so that there is one encoding per claim set.
func FuzzRoundTrip(f *testing.F) {
	for _, b := range seeds(f) {
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		out, err := encodeWithCert(b)
		if err != nil {
			return
		}
		if !bytes.Equal(out, b) {
			t.Fatalf("decoded and re-encoded, %d bytes became %d, first difference at %d", len(b), len(out), firstDiff(b, out))
		}
	})
}

func firstDiff(a, b []byte) int {
	for i := range min(len(a), len(b)) {
		if a[i] != b[i] {
			return i
		}
	}
	return min(len(a), len(b))
}

func TestJoinSectionVersion2(t *testing.T) {
	// One code per partner: 0, 10 for r - 1, 11 and an unsigned varint of
	// delta - 2 (SPEC.md, section 8).
	j := cert.Joins{Joined: []bool{true, false, true, true}, Delta: []uint64{1, 2, 130}}
	b := cert.AppendJoins(nil, j)
	// Codes 10 0 11 11 are the bits 1001111, padded with one zero bit.
	require.Equal(t, []byte{0b10011110, 0x00, 128, 1}, b, "codes, then varints 0 and 128")
	got, err := cert.ParseJoins(b, 4, 0)
	require.NoError(t, err)
	require.Equal(t, j, got)

	for name, c := range map[string]struct {
		b    []byte
		want string
	}{
		"a varint in a longer form than it needs": {[]byte{0b10011110, 0x80, 0x00, 128, 1}, "shortest-form"},
		// codes 0 0 0 11 (bits 00011, padded), then 2^64 - 2
		"a varint above 2^64 - 3":      {[]byte{0b00011000, 0xfe, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01}, "shortest-form"},
		"a varint cut off":             {[]byte{0b00011000, 0x80}, "shortest-form"},
		"a byte after the last varint": {[]byte{0b10011110, 0x00, 128, 1, 0}, "after the join deltas"},
		"nonzero padding":              {[]byte{0b10011111, 0x00, 128, 1}, "padding"},
	} {
		_, err := cert.ParseJoins(c.b, 4, 0)
		require.ErrorIs(t, err, cert.ErrMalformed, name)
		require.Contains(t, err.Error(), c.want, name)
	}
	// The largest delta the format carries, 2^64 - 1, round-trips.
	big := cert.Joins{Joined: []bool{true}, Delta: []uint64{1<<64 - 1}}
	got, err = cert.ParseJoins(cert.AppendJoins(nil, big), 1, 0)
	require.NoError(t, err)
	require.Equal(t, big, got)
}

func TestVersion1IsAnOlderFormatToReemit(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "testdata", "sieve-3n+1-k4.dcert"))
	require.NoError(t, err)
	b[8] = 1
	_, err = cert.NewReader(bytes.NewReader(b))
	require.ErrorIs(t, err, cert.ErrMalformed)
	require.ErrorIs(t, err, cert.ErrVersion)
	require.Contains(t, err.Error(), "older format")
	require.Contains(t, err.Error(), "re-emit")
}
