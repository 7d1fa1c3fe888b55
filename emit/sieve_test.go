package emit

import (
	"bytes"
	"context"
	"encoding/binary"
	"math/big"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/stretchr/testify/require"
	"golang.org/x/crypto/blake2b"

	"descent/cert"
)

// memFile is an in-memory io.WriterAt.
type memFile struct{ b []byte }

func (m *memFile) WriteAt(p []byte, off int64) (int, error) {
	if end := int(off) + len(p); end > len(m.b) {
		m.b = append(m.b, make([]byte, end-len(m.b))...)
	}
	return copy(m.b[off:], p), nil
}

func emitSieve(t testing.TB, m cert.Map, k, j int, o Options) (*Result, []byte) {
	t.Helper()
	var f memFile
	res, err := Sieve(context.Background(), &f, SieveParams{Map: m, K: k, J: j, Cap: DefaultCap}, o)
	require.NoError(t, err)
	require.EqualValues(t, res.Size, len(f.b))
	return res, f.b
}

// leaves decodes a certificate with package cert and returns its closed
// classes by step and its survivors.
func leaves(t testing.TB, file []byte) (closed map[int][]uint64, survivors []uint64) {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(file))
	require.NoError(t, err)
	h, err := cert.ParseSieveHeader(rd.Header)
	require.NoError(t, err)
	d := cert.SplitDepth(h.J)
	closed = map[int][]uint64{}
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err != nil {
			break
		}
		c, err := cert.ParseChunk(rec, 0)
		require.NoError(t, err)
		if i == 0 {
			require.Equal(t, [2]int{0, d}, [2]int{c.From, c.To})
		} else {
			require.Equal(t, [2]int{d, h.J}, [2]int{c.From, c.To})
		}
		require.NoError(t, c.Walk(func(cl cert.Class) error {
			switch {
			case cl.Closed:
				closed[cl.Depth] = append(closed[cl.Depth], cl.Residue)
			case cl.Depth == h.J:
				survivors = append(survivors, cl.Residue)
			}
			return nil
		}))
	}
	for _, rs := range closed {
		sort.Slice(rs, func(a, b int) bool { return rs[a] < rs[b] })
	}
	sort.Slice(survivors, func(a, b int) bool { return survivors[a] < survivors[b] })
	return closed, survivors
}

// OEIS A076227, "Number of surviving Collatz residues mod 2^n", a(0..28).
var a076227 = []uint64{1, 1, 1, 2, 3, 4, 8, 13, 19, 38, 64, 128, 226, 367, 734, 1295, 2114, 4228,
	7495, 14990, 27328, 46611, 93222, 168807, 286581, 573162, 1037374, 1762293, 3524586}

func TestSurvivorCountsA076227(t *testing.T) {
	for k := 1; k <= 28; k++ {
		res, _ := emitSieve(t, cert.Collatz, k, k, Options{})
		require.Equal(t, a076227[k], res.Header.Survivors, "k = %d (OEIS A076227)", k)
	}
}

func TestSurvivorsMod32And64(t *testing.T) {
	// OEIS A076227, example section: the survivors mod 32 and mod 64.
	_, f := emitSieve(t, cert.Collatz, 5, 5, Options{})
	_, s := leaves(t, f)
	require.Equal(t, []uint64{7, 15, 27, 31}, s)
	_, f = emitSieve(t, cert.Collatz, 6, 6, Options{})
	_, s = leaves(t, f)
	require.Equal(t, []uint64{7, 15, 27, 31, 39, 47, 59, 63}, s)
}

func TestClosingStepsA020914AndCountsA100982(t *testing.T) {
	res, _ := emitSieve(t, cert.Collatz, 28, 28, Options{})
	var steps []int
	var counts []uint64
	for t, c := range res.Header.ClosedAt {
		if c > 0 {
			steps = append(steps, t+1)
			counts = append(counts, c)
		}
	}
	// OEIS A020914, floor(1 + m*log2(3)), m = 0..17: the steps at which a
	// class can close.
	require.Equal(t, []int{1, 2, 4, 5, 7, 8, 10, 12, 13, 15, 16, 18, 20, 21, 23, 24, 26, 27}, steps)
	// OEIS A100982 (classes with stopping time exactly sigma_m, offset 1;
	// the even class mod 2 is left out there, it is our first entry). The
	// terms from 8045 on are from a secondary copy of the entry.
	a100982 := []uint64{1, 1, 2, 3, 7, 12, 30, 85, 173, 476, 961, 2652, 8045, 17637, 51033, 108950, 312455}
	require.Equal(t, append([]uint64{1}, a100982...), counts)
}

func TestClosingClassesA177789(t *testing.T) {
	_, f := emitSieve(t, cert.Collatz, 10, 10, Options{})
	closed, _ := leaves(t, f)
	// OEIS A177789 (citing Garner, Proc. AMS 82 (1981)): the classes
	// mod 2^t whose stopping time is t.
	want := map[int][]uint64{
		1: {0}, 2: {1}, 4: {3}, 5: {11, 23}, 7: {7, 15, 59},
		8: {39, 79, 95, 123, 175, 199, 219}, 10: {287, 347, 367, 423, 507, 575, 583, 735, 815, 923, 975, 999},
	}
	require.Empty(t, cmp.Diff(want, closed))
}

func TestOnlyExceptionOf3nPlus1IsOne(t *testing.T) {
	// Common practice, no source: the only member of a closing 3n+1 class
	// at or below its threshold is n = 1, on the trivial cycle.
	for _, k := range []int{2, 8, 16, 32} {
		res, _ := emitSieve(t, cert.Collatz, k, k, Options{})
		require.Len(t, res.Header.Exceptions, 1, "k = %d", k)
		e := res.Header.Exceptions[0]
		require.Equal(t, int64(1), e.N.Int64())
		require.Equal(t, cert.Cycle, e.Fate)
		require.Equal(t, int64(1), e.CycleMin.Int64())
	}
}

func TestFiveNPlusOneCycles(t *testing.T) {
	// From memory: 5n+1 has cycles through 1, 13 and 17 (odd members
	// {1, 3}, {13, 33, 83}, {17, 43, 27}); their smallest members are
	// exceptions of the k = 16 sieve, reported as cycles.
	res, _ := emitSieve(t, cert.Map{A: 5, B: 1}, 16, 16, Options{})
	found := map[int64]int64{}
	for _, e := range res.Header.Exceptions {
		if e.Fate == cert.Cycle {
			found[e.N.Int64()] = e.CycleMin.Int64()
		}
	}
	for _, m := range []int64{1, 13, 17} {
		require.Equal(t, m, found[m], "5n+1: n = %d should lie on its cycle", m)
	}
}

// bigClass follows r exactly with math/big for up to j steps and returns
// the step at which its class closes (0 if none) and the exact c of
// T^t(n) = (a^s n + c)/2^t. It is written plainly from the definitions, as
// a reference for the modular walk.
func bigClass(m cert.Map, r uint64, j int) (t, s int, c *big.Int) {
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	x := new(big.Int).SetUint64(r)
	pow := big.NewInt(1)
	for t = 1; t <= j; t++ {
		if x.Bit(0) == 1 {
			x.Mul(x, a).Add(x, b).Rsh(x, 1)
			pow.Mul(pow, a)
			s++
		} else {
			x.Rsh(x, 1)
		}
		if pow.Cmp(new(big.Int).Lsh(big.NewInt(1), uint(t))) < 0 {
			c = new(big.Int).Lsh(x, uint(t)) // c = 2^t T^t(r) - a^s r
			return t, s, c.Sub(c, new(big.Int).Mul(pow, new(big.Int).SetUint64(r)))
		}
	}
	return 0, s, nil
}

var maps = []cert.Map{{A: 3, B: 1}, {A: 3, B: -1}, {A: 3, B: 5}, {A: 5, B: 1}, {A: 7, B: 3}, {A: 3, B: 37}}

func TestWalkAgainstBigReference(t *testing.T) {
	// Every residue mod 2^k, followed exactly with math/big, must close at
	// the step the certificate says, or be a survivor; and the exceptions
	// must be exactly the members at or below each closing class's exact
	// threshold c/(2^t - a^s).
	for _, m := range maps {
		for _, k := range []int{3, 7, 11} {
			_, f := emitSieve(t, m, k, k, Options{})
			closed, survivors := leaves(t, f)
			wantClosed := map[int][]uint64{}
			var wantSurv []uint64
			wantExc := map[int64]bool{}
			for r := uint64(0); r < 1<<k; r++ {
				tc, s, c := bigClass(m, r, k)
				if tc == 0 {
					wantSurv = append(wantSurv, r)
					continue
				}
				if r >= 1<<tc {
					continue // counted at its class's own residue
				}
				wantClosed[tc] = append(wantClosed[tc], r)
				den := new(big.Int).Sub(new(big.Int).Lsh(big.NewInt(1), uint(tc)), new(big.Int).Exp(big.NewInt(int64(m.A)), big.NewInt(int64(s)), nil))
				for n := int64(r); n <= 1<<20; n += 1 << tc {
					if n == 0 {
						continue
					}
					if new(big.Int).Mul(den, big.NewInt(n)).Cmp(c) > 0 {
						break
					}
					wantExc[n] = true
				}
			}
			require.Empty(t, cmp.Diff(wantClosed, closed), "map %v k %d: closed classes", m, k)
			require.Equal(t, wantSurv, survivors, "map %v k %d: survivors", m, k)
			rd, err := cert.NewReader(bytes.NewReader(f))
			require.NoError(t, err)
			h, err := cert.ParseSieveHeader(rd.Header)
			require.NoError(t, err)
			gotExc := map[int64]bool{}
			for _, e := range h.Exceptions {
				gotExc[e.N.Int64()] = true
			}
			require.Equal(t, wantExc, gotExc, "map %v k %d: exceptions", m, k)
		}
	}
}

func TestModularParitiesToDepth64(t *testing.T) {
	// The walk follows values mod 2^64 (SPEC.md, "Why the walk may work
	// modulo 2^64"); check that against exact math/big iteration of random
	// residues mod 2^64 over all 64 steps, for several maps.
	rng := rand.New(rand.NewPCG(1, 2))
	for _, m := range maps {
		r, err := newRules(m, 64, 64)
		require.NoError(t, err)
		a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
		for range 200 {
			res := rng.Uint64()
			v, s := uint64(0), 0 // the walk: v = T^t(res mod 2^t) mod 2^64
			x := new(big.Int).SetUint64(res)
			for d := 0; d < 64; d++ {
				v += r.pow[s] * (res >> d & 1) // the child with bit d
				require.Equal(t, uint64(x.Bit(0)), v&1, "map %v, residue %d, step %d", m, res, d+1)
				if v&1 == 1 {
					v = (r.a*v + r.b) >> 1
					s++
					x.Mul(x, a).Add(x, b).Rsh(x, 1)
				} else {
					v >>= 1
					x.Rsh(x, 1)
				}
			}
		}
	}
}

func TestCountsAgreeWithWalkForOtherBudgets(t *testing.T) {
	// j < k: survivors mod 2^j stand for 2^(k-j) residues each.
	res, f := emitSieve(t, cert.Collatz, 40, 20, Options{})
	_, s := leaves(t, f)
	require.Equal(t, a076227[20]<<20, res.Header.Survivors)
	require.Len(t, s, int(a076227[20]))
	res, _ = emitSieve(t, cert.Collatz, 64, 16, Options{})
	require.Equal(t, a076227[16]<<48, res.Header.Survivors)
}

func TestDeterministicAcrossWorkers(t *testing.T) {
	_, want := emitSieve(t, cert.Collatz, 24, 24, Options{Workers: 1})
	for _, w := range []int{2, 3, 8} {
		_, got := emitSieve(t, cert.Collatz, 24, 24, Options{Workers: w})
		require.True(t, bytes.Equal(want, got), "workers = %d", w)
	}
}

func TestWorkedExampleFromTheSpec(t *testing.T) {
	// SPEC.md, section 5, derives this certificate by hand: 3 survivors mod
	// 16 (OEIS A076227, a(4) = 3), closings 1, 1, 0, 1 at steps 1..4 (the
	// even class, then OEIS A100982), the exception n = 1 on the cycle
	// 1, 2, top-chunk codes 1010 and stub codes 0100 below 3 mod 4, and
	// the ceiling W = max(128, 2*1 + 64) = 128 bits (the exception bound
	// is 1, of bit length 1). Build
	// the file from those facts with BLAKE2b and the RFC 6962 tree written
	// out here, and compare.
	be32 := func(b []byte, x uint32) []byte { return binary.BigEndian.AppendUint32(b, x) }
	be64 := func(b []byte, x uint64) []byte { return binary.BigEndian.AppendUint64(b, x) }
	body := be32(be32(nil, 3), 1)
	body = append(body, 4, 4)
	body = be32(body, 100000)
	body = be64(append(body, 0, 128), 3)
	for _, c := range []uint64{1, 1, 0, 1} {
		body = be64(body, c)
	}
	body = append(be32(body, 1), 1, 1, 2, 1, 1) // n = 1, cycle, m = 1
	header := append([]byte("descent\x00\x02s"), 0, 0, 0, 2)
	header = append(be32(header, uint32(len(body))), body...)
	top := append(be64(nil, 0), 0, 2, 0, 0, 0, 4, 0xa0)  // 1010
	stub := append(be64(nil, 3), 2, 4, 0, 0, 0, 4, 0x40) // 0100
	leaf := func(b []byte) [32]byte { return blake2b.Sum256(append([]byte{0}, b...)) }
	node := func(l, r [32]byte) [32]byte { return blake2b.Sum256(append(append([]byte{1}, l[:]...), r[:]...)) }
	l0, l1, l2 := leaf(header), leaf(top), leaf(stub)
	n01 := node(l0, l1)
	root := node(n01, l2)
	file := append([]byte(nil), header...)
	for _, h := range [][32]byte{l0, l1, l2, n01, l2, root} {
		file = append(file, h[:]...)
	}
	start := uint64(len(file) + 3*8)
	file = be64(be64(be64(file, start), start+uint64(len(top))), start+uint64(len(top)+len(stub)))
	file = append(append(file, top...), stub...)

	res, got := emitSieve(t, cert.Collatz, 4, 4, Options{})
	require.Equal(t, file, got)
	require.Equal(t, cert.Hash(root), res.Root)
	// testdata keeps the same file as a vector for the decoders.
	vec, err := os.ReadFile(filepath.Join("..", "testdata", "sieve-3n+1-k4.dcert"))
	require.NoError(t, err)
	require.Equal(t, file, vec)
}

func TestFateDefinitions(t *testing.T) {
	r, err := newRules(cert.Collatz, 8, 8)
	require.NoError(t, err)
	// OEIS A126241: 27 first drops below itself after 59 steps of T.
	e := r.fate(big.NewInt(27), 1000)
	require.Equal(t, cert.Descends, e.Fate)
	require.EqualValues(t, 59, e.Steps)
	// With a cap below 59 it is undecided, never a guess.
	require.Equal(t, cert.Undecided, r.fate(big.NewInt(27), 58).Fate)
	// 3n-1, from memory: 5 lies on the cycle 5, 7, 10 and 17 on one of 11
	// steps under T; 7 is on the cycle of 5 but T^2(7) = 5 < 7, so it
	// descends after 2 steps.
	r, err = newRules(cert.Map{A: 3, B: -1}, 8, 8)
	require.NoError(t, err)
	for _, c := range []struct {
		n    int64
		fate cert.FateKind
		v    int64
	}{{5, cert.Cycle, 5}, {17, cert.Cycle, 17}, {7, cert.Descends, 2}, {1, cert.Cycle, 1}} {
		e := r.fate(big.NewInt(c.n), 1000)
		require.Equal(t, c.fate, e.Fate, "3n-1, n = %d", c.n)
		if c.fate == cert.Cycle {
			require.Equal(t, c.v, e.CycleMin.Int64())
		} else {
			require.EqualValues(t, c.v, e.Steps)
		}
	}
	// The 17-cycle has 11 steps: with cap 10 the repeat is not seen.
	require.Equal(t, cert.Undecided, r.fate(big.NewInt(17), 10).Fate)
	require.Equal(t, cert.Cycle, r.fate(big.NewInt(17), 11).Fate)
}
