package main

import (
	"bytes"
	"io"
	"os"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
	"descent/check/kernel"
	"descent/internal/certtest"
)

// joinCut is a sieve certificate with joins taken apart: for each chunk
// below the top, its survivors in order and its join section.
type joinCut struct {
	h         *cert.SieveHeader
	chunks    []cert.Chunk
	survivors [][]uint64
	joins     []cert.Joins
}

func openJoins(t *testing.T, b []byte) *joinCut {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(b))
	require.NoError(t, err)
	h, err := cert.ParseSieveHeader(rd.Header)
	require.NoError(t, err)
	require.True(t, h.Joins)
	c := &joinCut{h: h}
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			return c
		}
		require.NoError(t, err)
		ch, rest, err := cert.ParseChunkJoins(rec, 0)
		require.NoError(t, err)
		var surv []uint64
		require.NoError(t, ch.Walk(func(cl cert.Class) error {
			if !cl.Closed && cl.Depth == h.J {
				surv = append(surv, cl.Residue)
			}
			return nil
		}))
		var j cert.Joins
		if i > 0 {
			j, err = cert.ParseJoins(rest, len(surv), 0)
			require.NoError(t, err)
		}
		c.chunks, c.survivors, c.joins = append(c.chunks, ch), append(c.survivors, surv), append(c.joins, j)
	}
}

func (c *joinCut) seal(t *testing.T) []byte {
	t.Helper()
	hb, err := c.h.Marshal()
	require.NoError(t, err)
	var recs [][]byte
	for i, ch := range c.chunks {
		rec := ch.Marshal()
		if i > 0 {
			rec = cert.AppendJoins(rec, c.joins[i])
		}
		recs = append(recs, rec)
	}
	b, err := certtest.Seal(hb, recs)
	require.NoError(t, err)
	return b
}

// claim sets the join of survivor number x of chunk i to delta (0: none),
// keeping the header's count true.
func (c *joinCut) claim(i, x int, delta uint64) {
	j := &c.joins[i]
	at := 0 // the place of x's delta among the joined
	for y := range x {
		if j.Joined[y] {
			at++
		}
	}
	switch {
	case j.Joined[x] && delta != 0:
		j.Delta[at] = delta
	case j.Joined[x]:
		j.Joined[x] = false
		j.Delta = append(j.Delta[:at], j.Delta[at+1:]...)
		c.h.Joined--
	case delta != 0:
		j.Joined[x] = true
		j.Delta = append(j.Delta[:at], append([]uint64{delta}, j.Delta[at:]...)...)
		c.h.Joined++
	}
}

// plainAfterK follows x for k steps of 3n+1 (values stay small here).
func plainAfterK(x uint64, k int) (int, uint64) {
	s := 0
	for range k {
		if x&1 == 1 {
			x = (3*x + 1) / 2
			s++
		} else {
			x /= 2
		}
	}
	return s, x
}

// pick finds a survivor, not joined, and a smaller residue whose state
// after k steps relates to the survivor's as want says.
func (c *joinCut) pick(t *testing.T, want func(s1 int, v1 uint64, s2 int, v2 uint64) bool) (int, int, uint64) {
	t.Helper()
	return c.pickPair(t, func(_, _ uint64, s1 int, v1 uint64, s2 int, v2 uint64) bool { return want(s1, v1, s2, v2) })
}

func (c *joinCut) pickPair(t *testing.T, want func(r, p uint64, s1 int, v1 uint64, s2 int, v2 uint64) bool) (int, int, uint64) {
	t.Helper()
	k := c.h.K
	for i := 1; i < len(c.chunks); i++ {
		for x, r := range c.survivors[i] {
			if c.joins[i].Joined[x] {
				continue
			}
			s1, v1 := plainAfterK(r, k)
			for p := r - 1; p+1 > 0 && r-p < 1<<12; p-- {
				if s2, v2 := plainAfterK(p, k); want(r, p, s1, v1, s2, v2) {
					return i, x, r - p
				}
			}
		}
	}
	t.Fatal("no such pair")
	return 0, 0, 0
}

func TestJoinForgeriesAreCaught(t *testing.T) {
	good := emitBytes(t, "-k", "14", "-join")
	code, rep := checkJSON(t, good)
	require.Equal(t, exitOK, code, "%v", rep)
	joinedBefore := rep["joined"]

	forgeries := []struct {
		name   string
		forge  func(c *joinCut)
		reason string
	}{
		// Format version 2 has no code for a partner at or above the
		// survivor (every delta is at least 1), so a partner below zero is
		// the only one out of range.
		{"a partner below zero", func(c *joinCut) {
			i, x, _ := c.pick(t, func(int, uint64, int, uint64) bool { return true })
			c.claim(i, x, c.survivors[i][x]+1)
		}, "join"},
		{"the largest delta the format carries", func(c *joinCut) {
			i, x, _ := c.pick(t, func(int, uint64, int, uint64) bool { return true })
			c.claim(i, x, cert.MaxJoinVarint+2)
		}, "join"},
		{"paths that meet for q = 0 only", func(c *joinCut) {
			// The numbers r and r' themselves meet (at a value above 4,
			// after different numbers of steps), so trying the member
			// q = 0 would pass; but after k steps the classes' states
			// differ, so 2^k*q + r and 2^k*q + r' part for other q.
			i, x, d := c.pickPair(t, func(r, p uint64, s1 int, v1 uint64, s2 int, v2 uint64) bool {
				return (s1 != s2 || v1 != v2) && orbitsMeetAbove(r, p, 4)
			})
			c.claim(i, x, d)
		}, "join"},
		{"odd-step counts differ", func(c *joinCut) {
			i, x, d := c.pick(t, func(s1 int, _ uint64, s2 int, _ uint64) bool { return s1 != s2 })
			c.claim(i, x, d)
		}, "join"},
		{"same odd steps, different values", func(c *joinCut) {
			i, x, d := c.pick(t, func(s1 int, v1 uint64, s2 int, v2 uint64) bool { return s1 == s2 && v1 != v2 })
			c.claim(i, x, d)
		}, "join"},
		{"a wrong joined count", func(c *joinCut) { c.h.Joined++ }, "count"},
		{"a join moved to the next survivor", func(c *joinCut) {
			for i := 1; i < len(c.chunks); i++ {
				j := c.joins[i]
				for x := 0; x+1 < len(j.Joined); x++ {
					if j.Joined[x] && !j.Joined[x+1] {
						j.Joined[x], j.Joined[x+1] = false, true
						return
					}
				}
			}
			t.Fatal("no join to move")
		}, "join"},
	}
	for _, f := range forgeries {
		t.Run(f.name, func(t *testing.T) {
			c := openJoins(t, good)
			f.forge(c)
			code, rep := checkJSON(t, c.seal(t))
			require.Equal(t, exitInvalid, code, "%v", rep)
			require.Equal(t, false, rep["valid"])
			require.Equal(t, f.reason, rep["reason"], "%v", rep["error"])
			_, listed := kernel.LookupReason(f.reason)
			require.True(t, listed, "reason %q is listed in kernel.Reasons", f.reason)
			require.NotEmpty(t, rep["where"])
		})
	}

	t.Run("a join left out is no error", func(t *testing.T) {
		// A missed join leaves a survivor to search; the claim stays true.
		c := openJoins(t, good)
		for i := 1; i < len(c.chunks); i++ {
			for x, joined := range c.joins[i].Joined {
				if joined {
					c.claim(i, x, 0)
					code, rep := checkJSON(t, c.seal(t))
					require.Equal(t, exitOK, code, "%v", rep)
					require.EqualValues(t, joinedBefore.(float64)-1, rep["joined"])
					return
				}
			}
		}
		t.Fatal("no join")
	})
	t.Run("partners other than r - 1", func(t *testing.T) {
		// The exhaustive finder (k <= 20) takes the smallest partner of
		// all, often below r - 1; the checker accepts any true one.
		b := emitBytes(t, "-k", "20", "-join")
		code, rep := checkJSON(t, b)
		require.Equal(t, exitOK, code, "%v", rep)
		c := openJoins(t, b)
		far := 0
		for _, j := range c.joins {
			for _, d := range j.Delta {
				if d > 1 {
					far++
				}
			}
		}
		require.Positive(t, far)
		t.Logf("k = 20: %d of the joins have a partner below r - 1", far)
	})
}

// orbitsMeetAbove says whether the 3n+1 orbits of x and y share a value
// above floor (within a few hundred steps; the values here are small).
func orbitsMeetAbove(x, y, floor uint64) bool {
	seen := map[uint64]bool{}
	for i := 0; i < 500 && x > floor; i++ {
		seen[x] = true
		x = step3(x)
	}
	for i := 0; i < 500 && y > floor; i++ {
		if seen[y] {
			return true
		}
		y = step3(y)
	}
	return false
}

func step3(x uint64) uint64 {
	if x&1 == 1 {
		return (3*x + 1) / 2
	}
	return x / 2
}

func TestJoinsInPartAndShardChecks(t *testing.T) {
	// A part check re-derives its record's joins: a forged join in the
	// part is caught against the published root, the true one passes.
	good := emitBytes(t, "-k", "16", "-join")
	c := openJoins(t, good)
	root := func(b []byte) string {
		rd, err := cert.NewReader(bytes.NewReader(b))
		require.NoError(t, err)
		return rd.Root().String()
	}
	dir := t.TempDir()
	write := func(name string, b []byte) string {
		p := dir + "/" + name
		require.NoError(t, os.WriteFile(p, b, 0o644))
		return p
	}
	part := -1
	for i := 1; i < len(c.chunks) && part < 0; i++ {
		for x := range c.joins[i].Joined {
			if !c.joins[i].Joined[x] {
				c.claim(i, x, 1) // a false join: r - 1 with another state
				part = i
				break
			}
		}
	}
	require.Positive(t, part)
	forged := c.seal(t)
	for _, f := range []struct {
		name string
		b    []byte
		code int
	}{{"good", good, exitOK}, {"forged", forged, exitInvalid}} {
		path := write(f.name+".dcert", f.b)
		code, stdout, stderr := runCLI("check", "-part", strconv.Itoa(part), "-root", root(f.b), path)
		require.Equal(t, f.code, code, "%s: %s %s", f.name, stdout, stderr)
		code, stdout, stderr = runCLI("check", "-shard", "0/1", path)
		require.Equal(t, f.code, code, "%s: %s %s", f.name, stdout, stderr)
	}
}
