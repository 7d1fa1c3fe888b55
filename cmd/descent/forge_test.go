package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math/big"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
	"descent/check/kernel"
	"descent/internal/certtest"
)

// Forgeries: certificates whose hashes and root are recomputed after a
// claim was changed, so that only re-derivation can catch them. They are
// built here with package cert, never by the checker's code.

// cut is a certificate taken apart.
type cut struct {
	h      *cert.SieveHeader
	chunks []cert.Chunk
}

func open(t *testing.T, b []byte) *cut {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(b))
	require.NoError(t, err)
	h, err := cert.ParseSieveHeader(rd.Header)
	require.NoError(t, err)
	c := &cut{h: h}
	for {
		rec, err := rd.Next()
		if err == io.EOF {
			return c
		}
		require.NoError(t, err)
		ch, err := cert.ParseChunk(rec, 0)
		require.NoError(t, err)
		c.chunks = append(c.chunks, ch)
	}
}

// seal writes the certificate with every hash recomputed.
func (c *cut) seal(t *testing.T) []byte {
	t.Helper()
	c.h.Chunks = len(c.chunks)
	hb, err := c.h.Marshal()
	require.NoError(t, err)
	var recs [][]byte
	for _, ch := range c.chunks {
		recs = append(recs, ch.Marshal())
	}
	b, err := certtest.Seal(hb, recs)
	require.NoError(t, err)
	return b
}

// node is a parsed trie code: split (code 0) has two open children;
// otherwise child closed closes and kids[1-closed] goes on. A nil *node
// is an open leaf.
type node struct {
	split  bool
	closed int
	kids   [2]*node
}

func parseCodes(t *testing.T, c cert.Chunk, from, to int) *node {
	pos := uint64(0)
	bit := func() int {
		require.Less(t, pos, c.NBits)
		b := int(c.Payload[pos/8]>>(7-pos%8)) & 1
		pos++
		return b
	}
	var parse func(d int) *node
	parse = func(d int) *node {
		if d == to {
			return nil
		}
		n := &node{}
		if bit() == 0 {
			n.split = true
			n.kids[0], n.kids[1] = parse(d+1), parse(d+1)
		} else {
			n.closed = bit()
			n.kids[1-n.closed] = parse(d + 1)
		}
		return n
	}
	root := parse(from)
	require.Equal(t, c.NBits, pos)
	return root
}

func (n *node) encode(w *cert.BitWriter) {
	if n == nil {
		return
	}
	if n.split {
		w.WriteBits(0, 1)
		n.kids[0].encode(w)
		n.kids[1].encode(w)
		return
	}
	w.WriteBits(uint64(2|n.closed), 2)
	n.kids[1-n.closed].encode(w)
}

func setCodes(c *cert.Chunk, root *node) {
	var w cert.BitWriter
	root.encode(&w)
	c.NBits, c.Payload = w.Len(), w.Bytes()
}

// count returns the open leaves (at depth to) below n, which is at depth
// d, and adds its closings by step to closed.
func (n *node) count(d, to int, closed []uint64) uint64 {
	if n == nil {
		return 1
	}
	if n.split {
		return n.kids[0].count(d+1, to, closed) + n.kids[1].count(d+1, to, closed)
	}
	closed[d+1]++
	return n.kids[1-n.closed].count(d+1, to, closed)
}

// evenChild is the child of residue r mod 2^d whose step d+1 is even,
// found by exact iteration.
func evenChild(m cert.Map, r uint64, d int) int {
	x := new(big.Int).SetUint64(r)
	for range d {
		if x.Bit(0) == 1 {
			x.Mul(x, big.NewInt(int64(m.A))).Add(x, big.NewInt(int64(m.B))).Rsh(x, 1)
		} else {
			x.Rsh(x, 1)
		}
	}
	return int(x.Bit(0))
}

// find walks the trie below n (residue r mod 2^d) in depth-first order
// and returns the first node for which ok holds.
func find(n *node, r uint64, d int, ok func(n *node, r uint64, d int) bool) (*node, uint64, int) {
	if n == nil {
		return nil, 0, 0
	}
	if ok(n, r, d) {
		return n, r, d
	}
	for y, k := range n.kids {
		if m, mr, md := find(k, r|uint64(y)<<d, d+1, ok); m != nil {
			return m, mr, md
		}
	}
	return nil, 0, 0
}

// checkJSON runs 'descent check -json' on b and returns the exit status
// and the report.
func checkJSON(t *testing.T, b []byte, flags ...string) (int, map[string]any) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "forged.dcert")
	require.NoError(t, os.WriteFile(path, b, 0o644))
	var out, errb bytes.Buffer
	c := &cli{stdout: &out, stderr: &errb}
	code := c.run(context.Background(), append(append([]string{"check", "-json"}, flags...), path))
	var rep map[string]any
	require.NoError(t, json.Unmarshal(out.Bytes(), &rep), out.String())
	return code, rep
}

func emitBytes(t *testing.T, args ...string) []byte {
	t.Helper()
	path := filepath.Join(t.TempDir(), "good.dcert")
	var out, errb bytes.Buffer
	c := &cli{stdout: &out, stderr: &errb}
	require.Equal(t, exitOK, c.run(context.Background(), append(append([]string{"emit", "sieve"}, args...), "-o", path)), errb.String())
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	return b
}

func TestForgeriesAreCaughtWithTheRightReason(t *testing.T) {
	good := emitBytes(t, "-k", "10")
	code, rep := checkJSON(t, good)
	require.Equal(t, exitOK, code)
	require.Equal(t, true, rep["valid"])
	d := cert.SplitDepth(10)

	forgeries := []struct {
		name   string
		forge  func(c *cut)
		reason string
	}{
		{"a survivor dropped", func(c *cut) {
			// A class at depth 9 whose two children survive: claim its even
			// child closes at step 10.
			for i := 1; i < len(c.chunks); i++ {
				root := parseCodes(t, c.chunks[i], d, 10)
				n, r, nd := find(root, c.chunks[i].Residue, d, func(n *node, _ uint64, nd int) bool { return n.split && nd == 9 })
				if n == nil {
					continue
				}
				n.split, n.closed = false, evenChild(c.h.Map, r, nd)
				n.kids = [2]*node{}
				setCodes(&c.chunks[i], root)
				c.h.Survivors--
				c.h.ClosedAt[9]++
				return
			}
			t.Fatal("no class with two survivors")
		}, "false-closing"},
		{"a class claimed closed one step early", func(c *cut) {
			// A class P whose even child closes: claim instead that P closes
			// one step earlier, as the even child of its parent.
			for i := 1; i < len(c.chunks); i++ {
				root := parseCodes(t, c.chunks[i], d, 10)
				g, r, gd := find(root, c.chunks[i].Residue, d, func(n *node, r uint64, nd int) bool {
					if !n.split {
						return false
					}
					e := evenChild(c.h.Map, r, nd)
					p := n.kids[e]
					return p != nil && !p.split && p.closed == evenChild(c.h.Map, r|uint64(e)<<nd, nd+1)
				})
				if g == nil {
					continue
				}
				e := evenChild(c.h.Map, r, gd)
				closed := make([]uint64, 11)
				open := g.kids[e].count(gd+1, 10, closed)
				c.h.Survivors -= open
				for s := 1; s <= 10; s++ {
					c.h.ClosedAt[s-1] -= closed[s]
				}
				c.h.ClosedAt[gd]++ // step gd+1
				g.split, g.closed, g.kids[e] = false, e, nil
				setCodes(&c.chunks[i], root)
				return
			}
			t.Fatal("no class to close early")
		}, "false-closing"},
		{"a wrong survivor count", func(c *cut) { c.h.Survivors++ }, "count"},
		{"a wrong closing count", func(c *cut) { c.h.ClosedAt[4]++ }, "count"},
		{"a different map in the header", func(c *cut) { c.h.Map = cert.Map{A: 3, B: -1} }, "false-closing"},
		{"another multiplier in the header", func(c *cut) { c.h.Map = cert.Map{A: 5, B: 1} }, "false-closing"},
		{"a missing exception", func(c *cut) { c.h.Exceptions = nil }, "exception"},
		{"an invented exception", func(c *cut) {
			c.h.Exceptions = append(c.h.Exceptions, cert.Exception{N: big.NewInt(5), Fate: cert.Descends, Steps: 3})
		}, "exception"},
		{"an invented exception above the bound", func(c *cut) {
			c.h.Exceptions = append(c.h.Exceptions, cert.Exception{N: big.NewInt(1000), Fate: cert.Undecided})
		}, "exception"},
		{"a wrong fate", func(c *cut) {
			c.h.Exceptions[0] = cert.Exception{N: big.NewInt(1), Fate: cert.Descends, Steps: 2}
		}, "exception"},
		{"a wrong j", func(c *cut) { c.h.J = 9; c.h.ClosedAt = c.h.ClosedAt[:9] }, "chunk-span"},
		{"swapped chunks", func(c *cut) { c.chunks[1], c.chunks[2] = c.chunks[2], c.chunks[1] }, "chunk-start"},
		{"a chunk dropped", func(c *cut) { c.chunks = c.chunks[:len(c.chunks)-1] }, "count"},
	}
	for _, f := range forgeries {
		t.Run(f.name, func(t *testing.T) {
			c := open(t, good)
			f.forge(c)
			code, rep := checkJSON(t, c.seal(t))
			require.Equal(t, exitInvalid, code, "%v", rep)
			require.Equal(t, false, rep["valid"])
			require.Equal(t, f.reason, rep["reason"], "%v", rep["error"])
			require.NotEmpty(t, rep["where"])
		})
	}
}

// rangeCut is a range certificate taken apart.
type rangeCut struct {
	h      *cert.RangeHeader
	blocks []*cert.Block
}

func openRange(t *testing.T, b []byte) *rangeCut {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(b))
	require.NoError(t, err)
	h, err := cert.ParseRangeHeader(rd.Header)
	require.NoError(t, err)
	c := &rangeCut{h: h}
	for {
		rec, err := rd.Next()
		if err == io.EOF {
			return c
		}
		require.NoError(t, err)
		blk, err := cert.ParseBlock(rec, 0, len(h.Rules))
		require.NoError(t, err)
		c.blocks = append(c.blocks, blk)
	}
}

func (c *rangeCut) seal(t *testing.T) []byte {
	t.Helper()
	hb, err := c.h.Marshal()
	require.NoError(t, err)
	var recs [][]byte
	for _, b := range c.blocks {
		rec, err := b.Marshal()
		require.NoError(t, err)
		recs = append(recs, rec)
	}
	b, err := certtest.Seal(hb, recs)
	require.NoError(t, err)
	return b
}

func checkRangeJSON(t *testing.T, b []byte, sieve string, extra ...string) (int, map[string]any) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "forged.dcert")
	require.NoError(t, os.WriteFile(path, b, 0o644))
	code, stdout, _ := runCLI(append(append([]string{"check", "-json", "-sieve", sieve}, extra...), path)...)
	var rep map[string]any
	require.NoError(t, json.Unmarshal([]byte(stdout), &rep), stdout)
	if r, ok := rep["reason"].(string); ok {
		_, listed := kernel.LookupReason(r)
		require.True(t, listed, "reason %q, which JSON gives, is listed in kernel.Reasons", r)
	}
	return code, rep
}

func TestRangeForgeries(t *testing.T) {
	dir := t.TempDir()
	sieve := filepath.Join(dir, "sieve.dcert")
	other := filepath.Join(dir, "other.dcert")
	good := filepath.Join(dir, "range.dcert")
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "12", "-o", sieve},
		{"emit", "sieve", "-k", "11", "-o", other},
		{"emit", "range", "-sieve", sieve, "-from", "2^30", "-to", "2^30+2^18", "-block", "14", "-o", good},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, stderr)
	}
	b, err := os.ReadFile(good)
	require.NoError(t, err)
	code, rep := checkRangeJSON(t, b, sieve)
	require.Equal(t, exitOK, code, "%v", rep)

	t.Run("a block summary changed, totals and hashes recomputed", func(t *testing.T) {
		c := openRange(t, b)
		const forged = 9
		blk := c.blocks[forged]
		blk.Sieve.Add(blk.Sieve, big.NewInt(1)) // one more by the sieve,
		blk.Search.Sub(blk.Search, big.NewInt(1))
		c.h.Totals.Sieve.Add(c.h.Totals.Sieve, big.NewInt(1)) // and the totals to match
		c.h.Totals.Search.Sub(c.h.Totals.Search, big.NewInt(1))
		forgedFile := c.seal(t)
		code, rep := checkRangeJSON(t, forgedFile, sieve)
		require.Equal(t, exitInvalid, code)
		require.Equal(t, "block", rep["reason"])
		require.EqualValues(t, forged, rep["where"].(map[string]any)["chunk"])

		// An audit catches it exactly when it draws that block.
		caught, passed := 0, 0
		for seed := range 40 {
			code, rep := checkRangeJSON(t, forgedFile, sieve, "-sample", "2", "-seed", strconv.Itoa(seed))
			switch code {
			case exitInvalid:
				require.Equal(t, "block", rep["reason"])
				require.EqualValues(t, forged, rep["where"].(map[string]any)["chunk"])
				caught++
			case exitOK:
				require.EqualValues(t, 2, rep["audit"].(map[string]any)["audited"])
				passed++
			default:
				t.Fatalf("exit %d: %v", code, rep)
			}
		}
		require.Positive(t, caught, "no audit of 2 of 16 blocks drew the forged one in 40 seeds")
		require.Positive(t, passed)
	})
	t.Run("the range edited", func(t *testing.T) {
		c := openRange(t, b)
		c.h.Hi.Sub(c.h.Hi, big.NewInt(1))
		code, rep := checkRangeJSON(t, c.seal(t), sieve)
		// The last block's counts no longer add up to its numbers.
		require.Equal(t, exitUsage, code)
		require.Equal(t, "malformed", rep["reason"])
		require.Contains(t, rep["error"], "numbers; it has")

		// With the counts adjusted too, the re-derivation disagrees.
		last := c.blocks[len(c.blocks)-1]
		last.Sieve.Sub(last.Sieve, big.NewInt(1))
		c.h.Totals.Sieve.Sub(c.h.Totals.Sieve, big.NewInt(1))
		code, rep = checkRangeJSON(t, c.seal(t), sieve)
		require.Equal(t, exitInvalid, code)
		require.Equal(t, "block", rep["reason"])
	})
	t.Run("the sieve root edited", func(t *testing.T) {
		// The range now names a sieve the reader was not given: the
		// checker cannot tell a forged name from a wrong file, and says
		// which sieve it needs (exit 2, not a verdict on the range).
		c := openRange(t, b)
		c.h.SieveRoot[0] ^= 1
		code, rep := checkRangeJSON(t, c.seal(t), sieve)
		require.Equal(t, exitUsage, code)
		require.Equal(t, "sieve-mismatch", rep["reason"])
	})
	t.Run("checked against another sieve", func(t *testing.T) {
		code, rep := checkRangeJSON(t, b, other)
		require.Equal(t, exitUsage, code)
		require.Equal(t, "sieve-mismatch", rep["reason"])
		require.Contains(t, rep["hint"], "give the sieve certificate whose root is")
	})
	t.Run("the header totals alone edited", func(t *testing.T) {
		c := openRange(t, b)
		c.h.Totals.SigmaSum.Add(c.h.Totals.SigmaSum, big.NewInt(1))
		code, rep := checkRangeJSON(t, c.seal(t), sieve, "-sample", "1")
		require.Equal(t, exitInvalid, code, "totals are checked against every block even in an audit")
		require.Equal(t, "count", rep["reason"])
	})
}

// topCodes writes the true top-chunk codes of map m down to depth d, by
// the rules of SPEC.md (parities modulo 2^64), and counts the stubs.
func topCodes(m cert.Map, d int) (cert.Chunk, int) {
	a, b := uint64(m.A), uint64(int64(m.B))
	pow := []uint64{1}
	bitl := []int{1}
	p := big.NewInt(1)
	for s := 1; s <= d+1; s++ {
		p.Mul(p, big.NewInt(int64(m.A)))
		pow = append(pow, p.Uint64())
		bitl = append(bitl, p.BitLen())
	}
	var w cert.BitWriter
	stubs := 0
	var walk func(t, s int, v uint64)
	walk = func(t, s int, v uint64) {
		if t == d {
			stubs++
			return
		}
		even := v & 1
		if bitl[s] <= t+1 {
			w.WriteBits(2|even, 2)
			vo := v + pow[s]*(1-even)
			walk(t+1, s+1, (a*vo+b)>>1)
			return
		}
		w.WriteBits(0, 1)
		for c := uint64(0); c < 2; c++ {
			vc := v + c*pow[s]
			if vc&1 == 0 {
				walk(t+1, s, vc>>1)
			} else {
				walk(t+1, s+1, (a*vc+b)>>1)
			}
		}
	}
	walk(0, 0, 0)
	return cert.Chunk{From: 0, To: d, NBits: w.Len(), Payload: w.Bytes()}, stubs
}

func TestShortTopChunkWithManyStubsAllocatesLittle(t *testing.T) {
	// True codes for 7n+1 down to depth 20 describe 324884 open
	// classes in 120 KB; the file declares one chunk below the top. The
	// checker must stop at the second stub, not list them all.
	m := cert.Map{A: 7, B: 1}
	top, stubs := topCodes(m, 20)
	require.Greater(t, stubs, 300000)
	h := &cert.SieveHeader{Map: m, K: 40, J: 40, Cap: 100, Ceiling: 128, Chunks: 2, Survivors: 1, ClosedAt: make([]uint64, 40)}
	c := &cut{h: h, chunks: []cert.Chunk{top, {Residue: 0, From: 20, To: 40}}}
	b := c.seal(t)
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	code, rep := checkJSON(t, b)
	runtime.ReadMemStats(&after)
	require.Equal(t, exitInvalid, code)
	require.Equal(t, "count", rep["reason"], "%v", rep["error"])
	require.Less(t, after.TotalAlloc-before.TotalAlloc, uint64(16<<20), "allocated %d bytes for a %d-byte file", after.TotalAlloc-before.TotalAlloc, len(b))
}

func TestHugeCapIsDecidedWithinTheCeiling(t *testing.T) {
	// 5n+11 with k = 10 has exceptions whose orbits grow (n = 5 is
	// undecided): with a cap of 2^24 and no ceiling, deciding them took
	// hours of big-number arithmetic and format version 1 refused the
	// certificate by a rule no other checker could follow. The ceiling
	// stops those orbits at 2^W; the work bound E*j + 3*C*X is within the
	// default budget, so the certificate is checked, and valid.
	if testing.Short() {
		t.Skip("follows exceptions for up to 3*2^24 steps in math/big, both to emit and to check")
	}
	b := emitBytes(t, "-k", "10", "-map", "5n+11", "-cap", strconv.Itoa(cert.MaxCap))
	code, rep := checkJSON(t, b)
	require.Equal(t, exitOK, code, "%v", rep)
	fates := map[string]string{}
	for _, e := range rep["exceptions"].([]any) {
		m := e.(map[string]any)
		fates[fmt.Sprint(m["n"])] = m["fate"].(string)
	}
	require.Equal(t, "undecided", fates["5"])

	// Under a budget below that bound it is beyond limits, before any
	// fate is followed: exit 2, neither valid nor invalid.
	code, rep = checkJSON(t, b, "-budget", "2^20")
	require.Equal(t, exitUsage, code, "%v", rep)
	require.Equal(t, "limits", rep["reason"])
	require.Contains(t, rep["error"], "more than the budget of 1048576")
}

func TestHostileRangeBlockIsRefusedInBoundedMemory(t *testing.T) {
	// A 5n+1 block of 2^24 numbers, all claimed to drop by the sieve, with
	// a cap of 20: in truth most of them are undecided, far more than a
	// block may list. The checker must stop deriving once it has more than
	// a record can hold, not collect millions.
	dir := t.TempDir()
	sieve := filepath.Join(dir, "s.dcert")
	require.Equal(t, exitOK, first(runCLI("emit", "sieve", "-k", "8", "-map", "5n+1", "-o", sieve)))
	_, root, err := readHeader(sieve)
	require.NoError(t, err)
	z := func() *big.Int { return new(big.Int) }
	lo := new(big.Int).Lsh(big.NewInt(1), 24)
	h := &cert.RangeHeader{Map: cert.Map{A: 5, B: 1}, SieveRoot: root, K: 8, E: 24, Cap: 20, Ceiling: 128, Lo: lo,
		Hi: new(big.Int).Lsh(big.NewInt(1), 25), Blocks: 1,
		Totals: cert.Summary{Sieve: new(big.Int).Set(lo), Join: z(), Search: z(), Small: z(), Cycle: z(), Undecided: z(), SigmaSum: z()}}
	blk := &cert.Block{Summary: h.Totals}
	c := &rangeCut{h: h, blocks: []*cert.Block{blk}}
	b := c.seal(t)
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	code, rep := checkRangeJSON(t, b, sieve)
	runtime.ReadMemStats(&after)
	require.Equal(t, exitInvalid, code, "%v", rep)
	require.Equal(t, "block", rep["reason"])
	require.Less(t, after.HeapInuse, before.HeapInuse+uint64(64<<20), "heap grew from %d to %d", before.HeapInuse, after.HeapInuse)

	// Counts that do not add up to the block's size are malformed.
	blk.Sieve = big.NewInt(1)
	h.Totals.Sieve = big.NewInt(1)
	code, rep = checkRangeJSON(t, c.seal(t), sieve)
	require.Equal(t, exitUsage, code)
	require.Contains(t, rep["error"], "counts 1 numbers; it has 16777216")
}

func TestCodesThatBreakTheGrammarAreMalformed(t *testing.T) {
	// A chunk whose codes run out before its leaves, or leave bits over,
	// breaks the grammar of SPEC.md, section 2: malformed (exit 2), even
	// with every hash recomputed, and even when a false claim comes first
	// in the walk (a record is decoded before it is judged).
	good := emitBytes(t, "-k", "10")
	for name, edit := range map[string]func(ch *cert.Chunk){
		"one bit short": func(ch *cert.Chunk) {
			ch.NBits--
			if pad := ch.NBits % 8; pad != 0 {
				ch.Payload[len(ch.Payload)-1] &= 0xff << (8 - pad)
			} else {
				ch.Payload = ch.Payload[:len(ch.Payload)-1]
			}
		},
		"one bit over": func(ch *cert.Chunk) {
			ch.NBits++
			if ch.NBits%8 == 1 {
				ch.Payload = append(ch.Payload, 0)
			}
		},
		"a false first code and one bit short": func(ch *cert.Chunk) {
			ch.Payload[0] ^= 0x80
			ch.NBits--
			if pad := ch.NBits % 8; pad != 0 {
				ch.Payload[len(ch.Payload)-1] &= 0xff << (8 - pad)
			} else {
				ch.Payload = ch.Payload[:len(ch.Payload)-1]
			}
		},
	} {
		c := open(t, good)
		ch := &c.chunks[len(c.chunks)-1]
		ch.Payload = append([]byte(nil), ch.Payload...)
		edit(ch)
		code, rep := checkJSON(t, c.seal(t))
		require.Equal(t, exitUsage, code, "%s: %v", name, rep)
		require.Equal(t, "malformed", rep["reason"], "%s: %v", name, rep["error"])
	}
}
