package emit

import (
	"bytes"
	"context"
	"io"
	"math/big"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func emitCensus(t testing.TB, p CensusParams, o CensusOptions) (*CensusResult, []byte) {
	t.Helper()
	var f memFile
	res, err := Census(context.Background(), &f, p, o)
	require.NoError(t, err)
	require.EqualValues(t, res.Size, len(f.b))
	return res, f.b
}

// decodeCensus reads a census certificate with package cert: its header and
// blocks, each block's hash checked against the stored tree.
func decodeCensus(t testing.TB, b []byte) (*cert.CensusHeader, []*cert.CensusBlock) {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(b))
	require.NoError(t, err)
	require.NoError(t, rd.CheckTree())
	h, err := cert.ParseCensusHeader(rd.Header)
	require.NoError(t, err)
	var blocks []*cert.CensusBlock
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			break
		}
		require.NoError(t, err)
		require.Equal(t, rd.Levels[0][i+1], cert.LeafHash(rec))
		blk, err := cert.ParseCensusBlock(rec, rd.Offs[i])
		require.NoError(t, err)
		require.NoError(t, h.CheckCensusBlockSpan(blk, i, rd.Offs[i]))
		blocks = append(blocks, blk)
	}
	return h, blocks
}

func census3n1(t testing.TB, lo, hi *big.Int, e int) (*cert.CensusHeader, []*cert.CensusBlock) {
	t.Helper()
	_, b := emitCensus(t, CensusParams{Map: cert.Collatz, Lo: lo, Hi: hi, E: e}, CensusOptions{})
	return decodeCensus(t, b)
}

// only returns the one cycle section of a summary, requiring that there is
// exactly one, with the given smallest member.
func only(t testing.TB, s cert.CensusSummary, min int64) cert.CycleCensus {
	t.Helper()
	require.Len(t, s.Cycles, 1)
	require.Equal(t, big.NewInt(min), s.Cycles[0].Min)
	return s.Cycles[0]
}

// byDelay counts the numbers of each delay (standard steps), and byT those
// of each number of steps of T (delay - height).
func byDelay(c cert.CycleCensus) (byDelay, byT, byHeight map[uint64]uint64) {
	byDelay, byT, byHeight = map[uint64]uint64{}, map[uint64]uint64{}, map[uint64]uint64{}
	for _, g := range c.Groups {
		for _, h := range g.Heights {
			byDelay[g.Delay] += h.Count
			byT[g.Delay-h.Height] += h.Count
			byHeight[h.Height] += h.Count
		}
	}
	return
}

func TestCensusDelayCountsA005186AndA060322(t *testing.T) {
	// OEIS A005186: the number of n whose delay (total stopping time in the
	// standard map) is exactly k; every such n is at most 2^k, so a census
	// of [1, 2^(K+1)) holds all of them for k <= K. OEIS A060322: the same
	// counted in steps of T, (3n+1)/2 and n/2 (every such n is at most 2^k
	// as well). Both k = 0..29 (check-values.md, "Census of trajectories").
	a005186 := []uint64{1, 1, 1, 1, 1, 2, 2, 4, 4, 6, 6, 8, 10, 14, 18, 24, 29, 36, 44, 58,
		72, 91, 113, 143, 179, 227, 287, 366, 460, 578}
	a060322 := []uint64{1, 1, 1, 1, 2, 3, 4, 5, 6, 8, 12, 18, 24, 31, 39, 50, 68, 91, 120, 159,
		211, 282, 381, 505, 665, 885, 1187, 1590, 2122, 2829}
	top := 20
	if !testing.Short() && !raceDetector {
		top = 29 // a census of [1, 2^30): about 40 CPU-seconds and 1.3 GB
	}
	h, _ := census3n1(t, big.NewInt(1), pow2(uint(top+1)), 0)
	delays, steps, _ := byDelay(only(t, h.Totals, 1))
	for k := 0; k <= top; k++ {
		require.Equal(t, a005186[k], delays[uint64(k)], "A005186(%d)", k)
		require.Equal(t, a060322[k], steps[uint64(k)], "A060322(%d)", k)
	}
	require.Zero(t, h.Totals.Undecided)
}

func TestCensusRecordsA006877AndA006884(t *testing.T) {
	h, _ := census3n1(t, big.NewInt(1), pow2(21), 16)
	c := only(t, h.Totals, 1)
	// OEIS A006877, delay records, with their delays A006878
	// (check-values.md): every term below 6171 is listed, so the records of
	// [1, 2^21) up to 6171 are exactly these.
	a006877 := []int64{1, 2, 3, 6, 7, 9, 18, 25, 27, 54, 73, 97, 129, 171, 231, 313, 327, 649, 703, 871,
		1161, 2223, 2463, 2919, 3711, 6171}
	a006878 := []uint64{0, 1, 7, 8, 16, 19, 20, 23, 111, 112, 115, 118, 121, 124, 127, 130, 143}
	var got []int64
	for i, r := range c.DelayRecords {
		if r.N.Int64() > 6171 {
			break
		}
		got = append(got, r.N.Int64())
		if i < len(a006878) {
			require.Equal(t, a006878[i], r.Delay, "A006878(%d)", i+1)
		}
	}
	require.Equal(t, a006877, got, "A006877")
	// OEIS A006884, path records, with their peaks in the standard map
	// A006885 (check-values.md): every term up to 113383 is listed.
	a006884 := []int64{1, 2, 3, 7, 15, 27, 255, 447, 639, 703, 1819, 4255, 4591, 9663, 20895, 26623, 31911,
		60975, 77671, 113383}
	a006885 := []int64{1, 2, 16, 52, 160, 9232, 13120, 39364, 41524, 250504, 1276936, 6810136, 8153620,
		27114424, 50143264}
	got = nil
	for i, r := range c.PathRecords {
		if r.N.Int64() > 113383 {
			break
		}
		got = append(got, r.N.Int64())
		if i < len(a006885) {
			require.Equal(t, a006885[i], r.Peak.Int64(), "A006885(%d)", i+1)
		}
	}
	require.Equal(t, a006884, got, "A006884")
}

func TestCensusFirstByDelayA033491(t *testing.T) {
	// OEIS A033491: the smallest n whose delay is k, k = 0..19; every such
	// n is at most 2^k (check-values.md).
	a033491 := []int64{1, 2, 4, 8, 16, 5, 10, 3, 6, 12, 24, 48, 17, 34, 11, 22, 7, 14, 28, 9}
	h, _ := census3n1(t, big.NewInt(1), pow2(20), 12)
	first := map[uint64]int64{}
	for _, g := range only(t, h.Totals, 1).Groups {
		first[g.Delay] = g.First.Int64()
	}
	for k, want := range a033491 {
		require.Equal(t, want, first[uint64(k)], "A033491(%d)", k)
	}
}

func TestCensusHeightOneA062052(t *testing.T) {
	// OEIS A062052, the numbers of height 1: 5, 10, 20, 21, 40, 42, 80,
	// 84, 85, then 160 (check-values.md). The census of each single n below
	// 86 has height 1 exactly for these.
	var got []int64
	for n := int64(1); n < 86; n++ {
		h, _ := census3n1(t, big.NewInt(n), big.NewInt(n+1), 0)
		c := only(t, h.Totals, 1)
		require.Len(t, c.Groups, 1)
		require.Len(t, c.Groups[0].Heights, 1)
		if c.Groups[0].Heights[0].Height == 1 {
			got = append(got, n)
		}
	}
	require.Equal(t, []int64{5, 10, 20, 21, 40, 42, 80, 84, 85}, got)
}

func TestCensus27(t *testing.T) {
	// 27 has height 41 (OEIS A006667) and delay 111 (A006577), and its
	// standard trajectory peaks at 9232 (A006885).
	h, blocks := census3n1(t, big.NewInt(27), big.NewInt(28), 0)
	c := only(t, h.Totals, 1)
	require.Equal(t, []cert.DelayGroup{{Delay: 111, First: big.NewInt(27), Heights: []cert.HeightCount{{Height: 41, Count: 1}}}}, c.Groups)
	require.Equal(t, []cert.PathRecord{{N: big.NewInt(27), Peak: big.NewInt(9232)}}, c.PathRecords)
	require.Len(t, blocks, 1)
	require.Equal(t, h.Totals, blocks[0].CensusSummary)
}

// refFate is the census fate of n by the definition of SPEC.md, section
// 12, written plainly with math/big and a table of the values seen: the
// first repeat of the orbit within 2C steps gives its cycle, and n is
// decided when the first index of the cycle's smallest member and the
// period are at most C, with no value of 2^W or more before the repeat.
func refFate(m cert.Map, n *big.Int, capSteps, ceiling int) (decided bool, min *big.Int, d, h int, peak *big.Int) {
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	seen := map[string]int{}
	var values []*big.Int
	x := new(big.Int).Set(n)
	for i := 0; i <= 2*capSteps; i++ {
		if x.BitLen() > ceiling {
			return false, nil, 0, 0, nil
		}
		if j, ok := seen[x.String()]; ok {
			min = values[j]
			for _, v := range values[j:] {
				if v.Cmp(min) < 0 {
					min = v
				}
			}
			for d = 0; values[d].Cmp(min) != 0; d++ {
			}
			if d > capSteps || i-j > capSteps {
				return false, nil, 0, 0, nil
			}
			peak = new(big.Int).Set(n)
			for _, v := range values[:d] {
				if v.Bit(0) == 1 {
					h++
					if y := new(big.Int).Add(new(big.Int).Mul(v, a), b); y.Cmp(peak) > 0 {
						peak = y
					}
				}
			}
			return true, min, d, h, peak
		}
		seen[x.String()] = i
		values = append(values, new(big.Int).Set(x))
		if x.Bit(0) == 0 {
			x = new(big.Int).Rsh(x, 1)
		} else {
			x = new(big.Int).Rsh(new(big.Int).Add(new(big.Int).Mul(x, a), b), 1)
		}
	}
	return false, nil, 0, 0, nil
}

// refBlock is the census of the numbers [lo, hi) by refFate, in the form
// of a block.
func refBlock(m cert.Map, lo, hi *big.Int, capSteps, ceiling int) cert.CensusSummary {
	type cyc struct {
		min       *big.Int
		counts    map[[2]uint64]uint64
		first     map[uint64]*big.Int
		delayRecs []cert.DelayRecord
		pathRecs  []cert.PathRecord
	}
	cycles := map[string]*cyc{}
	var s cert.CensusSummary
	for n := new(big.Int).Set(lo); n.Cmp(hi) < 0; n = new(big.Int).Add(n, big.NewInt(1)) {
		ok, min, d, h, peak := refFate(m, n, capSteps, ceiling)
		if !ok {
			s.Undecided++
			continue
		}
		c := cycles[min.String()]
		if c == nil {
			c = &cyc{min: min, counts: map[[2]uint64]uint64{}, first: map[uint64]*big.Int{}}
			cycles[min.String()] = c
		}
		delay := uint64(d + h)
		c.counts[[2]uint64{delay, uint64(h)}]++
		if c.first[delay] == nil {
			c.first[delay] = n
		}
		if k := len(c.delayRecs); k == 0 || delay > c.delayRecs[k-1].Delay {
			c.delayRecs = append(c.delayRecs, cert.DelayRecord{N: n, Delay: delay})
		}
		if k := len(c.pathRecs); k == 0 || peak.Cmp(c.pathRecs[k-1].Peak) > 0 {
			c.pathRecs = append(c.pathRecs, cert.PathRecord{N: n, Peak: peak})
		}
	}
	for _, c := range cycles {
		cc := cert.CycleCensus{Min: c.min, DelayRecords: c.delayRecs, PathRecords: c.pathRecs}
		var keys [][2]uint64
		for k := range c.counts {
			keys = append(keys, k)
		}
		sort.Slice(keys, func(i, j int) bool {
			return keys[i][0] < keys[j][0] || keys[i][0] == keys[j][0] && keys[i][1] < keys[j][1]
		})
		for _, k := range keys {
			if n := len(cc.Groups); n == 0 || cc.Groups[n-1].Delay != k[0] {
				cc.Groups = append(cc.Groups, cert.DelayGroup{Delay: k[0], First: c.first[k[0]]})
			}
			g := &cc.Groups[len(cc.Groups)-1]
			g.Heights = append(g.Heights, cert.HeightCount{Height: k[1], Count: c.counts[k]})
		}
		s.Cycles = append(s.Cycles, cc)
	}
	sort.Slice(s.Cycles, func(i, j int) bool { return s.Cycles[i].Min.Cmp(s.Cycles[j].Min) < 0 })
	return s
}

// requireBlocksMatchReference compares every block of a census with the
// plain reference over the block's numbers.
func requireBlocksMatchReference(t *testing.T, m cert.Map, b []byte) *cert.CensusHeader {
	t.Helper()
	h, blocks := decodeCensus(t, b)
	for i, blk := range blocks {
		lo, hi := h.CensusBlockBounds(i)
		want := refBlock(m, lo, hi, int(h.Cap), h.Ceiling)
		got := blk.CensusSummary
		if len(got.Cycles) == 0 {
			got.Cycles = nil
		}
		require.Equal(t, want, got, "block %d, [%v, %v)", i, lo, hi)
	}
	// The totals are the census of the whole range.
	want, got := refBlock(m, h.Lo, h.Hi, int(h.Cap), h.Ceiling), h.Totals
	if len(got.Cycles) == 0 {
		got.Cycles = nil
	}
	require.Equal(t, want, got, "the totals")
	return h
}

func TestCensusAgainstBigReference(t *testing.T) {
	// math/big as a plain reference: below 2^12, far from 1 (where the
	// memo does not reach), and above 2^128, where every number takes the
	// exact path.
	for _, c := range []struct {
		lo, hi *big.Int
		e      int
	}{
		{big.NewInt(1), pow2(12), 9},
		{pow2(40), new(big.Int).Add(pow2(40), pow2(11)), 9},
		{new(big.Int).Sub(pow2(64), pow2(9)), new(big.Int).Add(pow2(64), pow2(9)), 9},
		{pow2(130), new(big.Int).Add(pow2(130), pow2(7)), 6},
	} {
		_, b := emitCensus(t, CensusParams{Map: cert.Collatz, Lo: c.lo, Hi: c.hi, E: c.e}, CensusOptions{})
		requireBlocksMatchReference(t, cert.Collatz, b)
	}
}

func TestCensusCapAndOtherMapsAgainstBigReference(t *testing.T) {
	// 3n-1 reaches the cycles whose smallest members are 1, 5 and 17;
	// 5n+1 those through 1, 13 and 17, and most of its orbits grow past
	// the ceiling (check-values.md, "Other maps", from memory). A small cap
	// leaves 3n+1 numbers undecided (27 needs 70 steps of T).
	// The last cases lie above a small memo, so that the fast path's
	// shortcuts for even numbers and for 3n+b take their turn.
	for _, c := range []struct {
		m        cert.Map
		lo, hi   int64
		capSteps uint32
		memo     int
		cycles   []int64
	}{
		{cert.Map{A: 3, B: -1}, 1, 1000, 0, 0, []int64{1, 5, 17}},
		{cert.Map{A: 5, B: 1}, 1, 300, 1000, 0, []int64{1, 13, 17}},
		{cert.Collatz, 1, 1000, 50, 0, []int64{1}},
		{cert.Map{A: 3, B: -1}, 1 << 18, 1<<18 + 1<<9, 0, 16, []int64{1, 5, 17}},
		{cert.Map{A: 5, B: 1}, 1 << 18, 1<<18 + 1<<8, 1000, 16, nil},
		{cert.Map{A: 3, B: 5}, 1 << 18, 1<<18 + 1<<9, 0, 16, nil},
	} {
		_, b := emitCensus(t, CensusParams{Map: c.m, Lo: big.NewInt(c.lo), Hi: big.NewInt(c.hi), E: 7, Cap: c.capSteps}, CensusOptions{MemoBits: c.memo})
		h := requireBlocksMatchReference(t, c.m, b)
		if c.cycles == nil {
			continue
		}
		var mins []int64
		for _, cy := range h.Totals.Cycles {
			mins = append(mins, cy.Min.Int64())
		}
		require.Equal(t, c.cycles, mins, "%v", c.m)
	}
}

func TestCensusSameBytesWhateverTheMemoWorkersAndRun(t *testing.T) {
	// The memo and the workers change how the numbers are computed, never
	// the bytes; a run resumed from completed blocks, or written in shards
	// and merged, writes the same certificate.
	p := CensusParams{Map: cert.Collatz, Lo: big.NewInt(3), Hi: new(big.Int).Add(pow2(19), big.NewInt(5)), E: 16}
	want, b := emitCensus(t, p, CensusOptions{Workers: 1})
	for _, o := range []CensusOptions{{Workers: 2}, {Workers: 3, MemoBits: 16}, {MemoBits: 17}, {MemoBits: 22}} {
		got, b2 := emitCensus(t, p, o)
		require.Equal(t, want.Root, got.Root, "%+v", o)
		require.Equal(t, b, b2)
	}
	var done [][]byte
	_, blocks := decodeCensus(t, b)
	for _, blk := range blocks[:5] {
		rec, err := blk.Marshal()
		require.NoError(t, err)
		done = append(done, rec)
	}
	got, _ := emitCensus(t, p, CensusOptions{Done: done})
	require.Equal(t, want.Root, got.Root)

	var shards []ShardInput
	for i := range 3 {
		_, sb := emitCensus(t, p, CensusOptions{Shard: &Shard{I: i, N: 3}})
		shards = append(shards, ShardInput{Name: "shard", R: bytes.NewReader(sb)})
	}
	var merged memFile
	_, root, err := Merge(&merged, shards)
	require.NoError(t, err)
	require.Equal(t, want.Root, root)
	require.Equal(t, b, merged.b)
}

func TestCensusFarBlockAlone(t *testing.T) {
	// A block far from 1 is computed without the numbers below it: the memo
	// covers about the block's width, and the run matches the reference on
	// a sample of its numbers.
	lo := pow2(40)
	hi := new(big.Int).Add(lo, pow2(16))
	_, b := emitCensus(t, CensusParams{Map: cert.Collatz, Lo: lo, Hi: hi, E: 16}, CensusOptions{})
	h, blocks := decodeCensus(t, b)
	require.Len(t, blocks, 1)
	require.Zero(t, h.Totals.Undecided)
	c := only(t, h.Totals, 1)
	for _, r := range c.PathRecords {
		ok, _, _, _, peak := refFate(cert.Collatz, r.N, 100000, h.Ceiling)
		require.True(t, ok)
		require.Equal(t, peak, r.Peak, "the peak of %v", r.N)
	}
	for _, g := range c.Groups {
		ok, _, d, hh, _ := refFate(cert.Collatz, g.First, 100000, h.Ceiling)
		require.True(t, ok)
		require.Equal(t, g.Delay, uint64(d+hh), "the delay of %v", g.First)
	}
}

func TestCensusWorkedExample(t *testing.T) {
	// The certificate of SPEC.md, section 12, "Example": every block and
	// the totals agree with the math/big reference, and testdata keeps the
	// same file, which a test of package cert compares with the spec's hex.
	_, b := emitCensus(t, CensusParams{Map: cert.Collatz, Lo: big.NewInt(1), Hi: big.NewInt(32), E: 4}, CensusOptions{})
	requireBlocksMatchReference(t, cert.Collatz, b)
	vec, err := os.ReadFile(filepath.Join("..", "testdata", "census-3n+1-to-32.dcert"))
	require.NoError(t, err)
	require.Equal(t, vec, b)
}

func TestCensusJournal(t *testing.T) {
	// An interrupted census keeps its completed blocks in a journal; the
	// same parameters resume from them and write the same certificate, and
	// other parameters are refused while the run may still be resumed.
	p := CensusParams{Map: cert.Collatz, Lo: big.NewInt(1), Hi: pow2(18), E: 14}
	require.NoError(t, NormalizeCensus(&p))
	want, _ := emitCensus(t, p, CensusOptions{})
	path := filepath.Join(t.TempDir(), "c.partial")
	j, done, err := OpenCensusJournal(path, p, nil)
	require.NoError(t, err)
	require.Empty(t, done)
	ctx, cancel := context.WithCancel(context.Background())
	_, err = Census(ctx, &memFile{}, p, CensusOptions{Workers: 1, Block: func(rec []byte) error {
		if err := j.Append(rec); err != nil {
			return err
		}
		if j.Blocks() == 5 {
			cancel()
		}
		return nil
	}})
	cancel()
	require.ErrorIs(t, err, context.Canceled)
	require.NoError(t, j.Close())

	q := p
	q.E = 15
	_, _, err = OpenCensusJournal(path, q, nil)
	var conflict *JournalConflictError
	require.ErrorAs(t, err, &conflict)
	require.Equal(t, 5, conflict.Blocks)
	require.Equal(t, "census of 3n+1 from 1 to 262144, blocks of 2^14, cap 100000, ceiling 2^128", conflict.Run)

	j, done, err = OpenCensusJournal(path, p, nil)
	require.NoError(t, err)
	require.Len(t, done, 5)
	got, _ := emitCensus(t, p, CensusOptions{Done: done, Block: j.Append})
	require.Equal(t, want.Root, got.Root)
	require.Equal(t, 16, j.Blocks())
	require.NoError(t, j.Remove())
}
