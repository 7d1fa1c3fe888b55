package cert_test

import (
	"bytes"
	"encoding/binary"
	"encoding/hex"
	"math/big"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func TestCensusWorkedExampleHexInSpec(t *testing.T) {
	// The hex dump in SPEC.md, section 12, is the file in testdata, and the
	// hashes printed below it are those of its header and records by the
	// reference mth.
	spec, err := os.ReadFile("SPEC.md")
	require.NoError(t, err)
	m := regexp.MustCompile(`(?s)<!-- hex:census-3n\+1-to-32 -->\n(.*?)<!-- end hex -->(.*)`).FindSubmatch(spec)
	require.NotNil(t, m, "no census hex dump in SPEC.md")
	var dump []byte
	for _, line := range strings.Split(strings.TrimSpace(string(m[1])), "\n") {
		_, rest, ok := strings.Cut(line, ": ")
		require.True(t, ok, line)
		groups, _, _ := strings.Cut(rest, "  ")
		b, err := hex.DecodeString(strings.ReplaceAll(strings.TrimSpace(groups), " ", ""))
		require.NoError(t, err, line)
		dump = append(dump, b...)
	}
	file, err := os.ReadFile(filepath.Join("..", "testdata", "census-3n+1-to-32.dcert"))
	require.NoError(t, err)
	require.Equal(t, file, dump)

	rd, err := cert.NewReader(bytes.NewReader(dump))
	require.NoError(t, err)
	header := rd.Header
	r0, r1 := dump[rd.Offs[0]:rd.Offs[1]], dump[rd.Offs[1]:rd.Offs[2]]
	leaf := func(b []byte) [32]byte { return mth([][]byte{b}) }
	after := string(m[2])
	for label, h := range map[string][32]byte{
		"leaf 0 (header)":  leaf(header),
		"leaf 1 (block 0)": leaf(r0),
		"leaf 2 (block 1)": leaf(r1),
		"inner(leaf 0, 1)": mth([][]byte{header, r0}),
		"root":             mth([][]byte{header, r0, r1}),
	} {
		line := regexp.MustCompile(regexp.QuoteMeta(label) + ` +([0-9a-f]{64})`).FindStringSubmatch(after)
		require.NotNil(t, line, label)
		require.Equal(t, hex.EncodeToString(h[:]), line[1], label)
	}
	// The work bound worked out under the dump.
	h, err := cert.ParseCensusHeader(header)
	require.NoError(t, err)
	blk, err := cert.ParseCensusBlock(r1, rd.Offs[1])
	require.NoError(t, err)
	require.NoError(t, h.CheckCensusBlockSpan(blk, 1, rd.Offs[1]))
	w := blk.WorkBound(h.Cap)
	require.Contains(t, after, ": "+w.String()+" steps")
}

// censusExample is a hand-made header and block for the round trips.
func censusExample() (*cert.CensusHeader, *cert.CensusBlock) {
	sum := cert.CensusSummary{Cycles: []cert.CycleCensus{{
		Min: big.NewInt(1),
		Groups: []cert.DelayGroup{
			{Delay: 5, First: big.NewInt(5), Heights: []cert.HeightCount{{Height: 1, Count: 1}}},
			{Delay: 300, First: new(big.Int).Lsh(big.NewInt(1), 70), Heights: []cert.HeightCount{{Height: 2, Count: 1 << 40}, {Height: 150, Count: 3}}},
		},
		DelayRecords: []cert.DelayRecord{{N: big.NewInt(5), Delay: 5}, {N: big.NewInt(9), Delay: 300}},
		PathRecords:  []cert.PathRecord{{N: big.NewInt(5), Peak: big.NewInt(16)}, {N: big.NewInt(9), Peak: new(big.Int).Lsh(big.NewInt(1), 200)}},
	}}, Undecided: 2}
	h := &cert.CensusHeader{Map: cert.Collatz, Cap: 1000, Ceiling: 300, E: 10, Lo: big.NewInt(5), Hi: big.NewInt(3000), Blocks: 3, Totals: sum}
	b := &cert.CensusBlock{Index: 1, CensusSummary: sum, UndecidedNs: []*big.Int{big.NewInt(1500), big.NewInt(2000)}}
	return h, b
}

func TestCensusRoundTrip(t *testing.T) {
	h, b := censusExample()
	hb, err := h.Marshal()
	require.NoError(t, err)
	h2, err := cert.ParseCensusHeader(hb)
	require.NoError(t, err)
	require.Equal(t, h, h2)
	rec, err := b.Marshal()
	require.NoError(t, err)
	b2, err := cert.ParseCensusBlock(rec, 0)
	require.NoError(t, err)
	require.Equal(t, b, b2)
	// A shard's copy of the whole's header has empty totals.
	h.Totals = cert.CensusSummary{}
	hb, err = h.Marshal()
	require.NoError(t, err)
	sh := &cert.ShardHeader{Whole: cert.KindCensus, Index: 1, Of: 2, First: 1, Count: 2, WholeHeader: hb}
	sb, err := sh.Marshal()
	require.NoError(t, err)
	sh2, err := cert.ParseShardHeader(sb)
	require.NoError(t, err)
	require.Equal(t, sh, sh2)
}

func TestCensusRejectsWhatIsNotCanonical(t *testing.T) {
	h, b := censusExample()
	rec, err := b.Marshal()
	require.NoError(t, err)
	hb, err := h.Marshal()
	require.NoError(t, err)

	// A small block to alter: index (bytes 0..3), K = 1 (4), m = 1 (5, 6),
	// G = 2 (7), then the groups: D = 5 (8), first 5 (9, 10), H = 1 (11),
	// h = 1 (12), c = 1 (13); D = 6 (14), first 10 (15, 16), H, h, c.
	small := &cert.CensusBlock{CensusSummary: cert.CensusSummary{Cycles: []cert.CycleCensus{{Min: big.NewInt(1),
		Groups: []cert.DelayGroup{
			{Delay: 5, First: big.NewInt(5), Heights: []cert.HeightCount{{Height: 1, Count: 1}}},
			{Delay: 6, First: big.NewInt(10), Heights: []cert.HeightCount{{Height: 1, Count: 1}}}},
		DelayRecords: []cert.DelayRecord{{N: big.NewInt(5), Delay: 5}}, PathRecords: []cert.PathRecord{{N: big.NewInt(5), Peak: big.NewInt(16)}}}}}}
	rec, err = small.Marshal()
	require.NoError(t, err)
	require.Equal(t, []byte{0, 0, 0, 0, 1, 1, 1, 2, 5, 1, 5, 1, 1, 1, 6, 1, 10, 1, 1, 1}, rec[:20])
	bad := func(name string, mutate func([]byte) []byte) {
		t.Helper()
		r := mutate(append([]byte(nil), rec...))
		_, err := cert.ParseCensusBlock(r, 0)
		require.ErrorIs(t, err, cert.ErrMalformed, name)
	}
	_, err = cert.ParseCensusBlock(rec, 0)
	require.NoError(t, err)
	bad("a varint not in shortest form", func(r []byte) []byte { // K = 1 as 81 00
		return append(append(r[:4:4], 0x81, 0x00), r[5:]...)
	})
	bad("groups out of order", func(r []byte) []byte { r[14] = 4; return r })
	bad("a height above half the delay", func(r []byte) []byte { r[12] = 3; return r })
	bad("a count of 0", func(r []byte) []byte { r[13] = 0; return r })
	bad("a byte after the last undecided number", func(r []byte) []byte { return append(r, 0) })
	bad("cut short", func(r []byte) []byte { return r[:len(r)-1] })
	bad("a varint past 64 bits", func(r []byte) []byte {
		return append(append(r[:4:4], bytes.Repeat([]byte{0xff}, 10)...), append([]byte{1}, r[5:]...)...)
	})

	// A block's undecided count beyond the cap is refused before its list
	// is read.
	over := binary.AppendUvarint(append([]byte(nil), 0, 0, 0, 0, 0), cert.MaxCensusUndecided+1)
	_, err = cert.ParseCensusBlock(over, 0)
	require.ErrorIs(t, err, cert.ErrMalformed)

	for name, mutate := range map[string]func(*cert.CensusHeader){
		"a range of 2^64 numbers":   func(h *cert.CensusHeader) { h.Lo, h.Hi = big.NewInt(1), new(big.Int).Lsh(big.NewInt(1), 64) },
		"a range above the ceiling": func(h *cert.CensusHeader) { h.Hi = new(big.Int).Lsh(big.NewInt(1), 301) },
		"block exponent 0":          func(h *cert.CensusHeader) { h.E = 0 },
		"another block count":       func(h *cert.CensusHeader) { h.Blocks = 4 },
		"a cap of 0":                func(h *cert.CensusHeader) { h.Cap = 0 },
	} {
		h2, _ := censusExample()
		mutate(h2)
		_, err := h2.Marshal()
		require.Error(t, err, name)
	}
	// The same header bytes with a byte after the body, or a ceiling
	// below 128, are malformed.
	long := append(append([]byte(nil), hb...), 0)
	binary.BigEndian.PutUint32(long[14:], binary.BigEndian.Uint32(long[14:])+1)
	_, err = cert.ParseCensusHeader(long)
	require.ErrorIs(t, err, cert.ErrMalformed)
	low := append([]byte(nil), hb...)
	binary.BigEndian.PutUint16(low[cert.PreambleSize+12:], 127)
	_, err = cert.ParseCensusHeader(low)
	require.ErrorIs(t, err, cert.ErrMalformed)

	// The counts of a block must add up to its numbers.
	require.Error(t, h.CheckCensusBlockSpan(b, 1, 0))
}

// FuzzCensusRoundTrip: a census block or header that package cert accepts
// is written back byte for byte, so that a census has one encoding.
//
//	go test ./cert -run '^$' -fuzz '^FuzzCensusRoundTrip$' -parallel 1 -fuzztime 10m -fuzzminimizetime 5s
func FuzzCensusRoundTrip(f *testing.F) {
	h, b := censusExample()
	rec, err := b.Marshal()
	require.NoError(f, err)
	hb, err := h.Marshal()
	require.NoError(f, err)
	f.Add(rec)
	f.Add(hb)
	file, err := os.ReadFile(filepath.Join("..", "testdata", "census-3n+1-to-32.dcert"))
	require.NoError(f, err)
	f.Add(file[:230])    // its header
	f.Add(file[446:573]) // block 0
	f.Fuzz(func(t *testing.T, b []byte) {
		if blk, err := cert.ParseCensusBlock(b, 0); err == nil {
			out, err := blk.Marshal()
			require.NoError(t, err)
			require.Equal(t, b, out)
		}
		if h, err := cert.ParseCensusHeader(b); err == nil {
			out, err := h.Marshal()
			require.NoError(t, err)
			require.Equal(t, b, out)
		}
	})
}
