package emit

import (
	"bytes"
	"context"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func emitJoins(t testing.TB, k int) (*Result, []byte) {
	t.Helper()
	var f memFile
	res, err := Sieve(context.Background(), &f, SieveParams{Map: cert.Collatz, K: k, J: k, Joins: true}, Options{})
	require.NoError(t, err)
	return res, f.b
}

func TestJoinsRoosendaal(t *testing.T) {
	// Eric Roosendaal, "On the 3x+1 problem", technical page: with joins
	// removed, the 2^16 sieve leaves 1720 of 65536 classes instead of 2114.
	res, _ := emitJoins(t, 16)
	require.EqualValues(t, 2114, res.Header.Survivors)
	require.EqualValues(t, 2114-1720, res.Header.Joined)
}

func TestJoinSectionsAreTheJoins(t *testing.T) {
	// Every listed join is true by exact iteration (math/big is not needed:
	// values stay below 2^63 here), and the count matches the sections.
	_, file := emitJoins(t, 14)
	h, survivors, deltas := sections(t, file)
	require.True(t, h.Joins)
	var listed uint64
	for i, r := range survivors {
		if deltas[i] == 0 {
			continue
		}
		listed++
		p := r - deltas[i]
		require.Less(t, p, r)
		s1, v1 := exactK(r, 14)
		s2, v2 := exactK(p, 14)
		require.Equal(t, [2]uint64{s1, v1}, [2]uint64{s2, v2}, "survivor %d, partner %d", r, p)
	}
	require.Equal(t, h.Joined, listed)
}

func exactK(x uint64, k int) (uint64, uint64) {
	s := uint64(0)
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

// sections reads a sieve with joins: its survivors in order, and for each
// the delta of its join (0 for none).
func sections(t testing.TB, file []byte) (*cert.SieveHeader, []uint64, []uint64) {
	t.Helper()
	rd, err := cert.NewReader(bytes.NewReader(file))
	require.NoError(t, err)
	h, err := cert.ParseSieveHeader(rd.Header)
	require.NoError(t, err)
	var survivors []uint64
	var deltas []uint64
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err != nil {
			break
		}
		c, rest, err := cert.ParseChunkJoins(rec, 0)
		require.NoError(t, err)
		n := len(survivors)
		require.NoError(t, c.Walk(func(cl cert.Class) error {
			if !cl.Closed && cl.Depth == h.J {
				survivors = append(survivors, cl.Residue)
			}
			return nil
		}))
		if i == 0 {
			require.Empty(t, rest)
			continue
		}
		j, err := cert.ParseJoins(rest, len(survivors)-n, 0)
		require.NoError(t, err)
		for _, joined := range j.Joined {
			if joined {
				deltas = append(deltas, j.Delta[0])
				j.Delta = j.Delta[1:]
			} else {
				deltas = append(deltas, 0)
			}
		}
	}
	return h, survivors, deltas
}

// afterK follows x for k steps of a*n + b exactly (the values here stay
// far below 2^63) and returns the odd steps and T^k(x).
func afterK(m cert.Map, x uint64, k int) (int, uint64) {
	s := 0
	for range k {
		if x&1 == 1 {
			x = uint64(int64(m.A)*int64(x)+int64(m.B)) / 2
			s++
		} else {
			x /= 2
		}
	}
	return s, x
}

func TestPairWalkFindsEveryNeighbourJoin(t *testing.T) {
	// Above ExhaustiveJoins the finder tries r - 1 only, pruning where the
	// pair provably cannot meet. Against a plain test of every survivor
	// with its neighbour, it must find exactly the same joins.
	for _, c := range []struct {
		m cert.Map
		k int
	}{{cert.Collatz, 22}, {cert.Collatz, 24}, {cert.Map{A: 3, B: -1}, 22}, {cert.Map{A: 5, B: 1}, 21}, {cert.Map{A: 3, B: 5}, 21}} {
		var f memFile
		res, err := Sieve(context.Background(), &f, SieveParams{Map: c.m, K: c.k, J: c.k, Joins: true}, Options{})
		require.NoError(t, err, "%v k=%d", c.m, c.k)
		h, survivors, deltas := sections(t, f.b)
		require.EqualValues(t, res.Header.Survivors, len(survivors))
		var want, got uint64
		for i, r := range survivors {
			s1, v1 := afterK(c.m, r, c.k)
			s2, v2 := afterK(c.m, r-1, c.k)
			joined := s1 == s2 && v1 == v2
			if joined {
				want++
			}
			if deltas[i] != 0 {
				got++
				require.EqualValues(t, 1, deltas[i], "%v k=%d: survivor %d", c.m, c.k, r)
			}
			require.Equal(t, joined, deltas[i] != 0, "%v k=%d: survivor %d", c.m, c.k, r)
		}
		require.Equal(t, want, h.Joined)
		t.Logf("%v k=%d: %d survivors, %d joined to r-1", c.m, c.k, len(survivors), got)
	}
}

func TestNeighbourJoinsAgainstAllResidues(t *testing.T) {
	// At k = 20 both finders can run: every join the r - 1 method finds
	// is one the exhaustive search finds too, and the note's count of
	// misses is measured here.
	const k = 20
	r, err := newRules(cert.Collatz, k, k)
	require.NoError(t, err)
	all, err := newJoinFinder(r)
	require.NoError(t, err)
	near := *all
	near.partner = nil
	d := cert.SplitDepth(k)
	levels := min(bottomLevels, k-d)
	table := buildBottom(r, levels)
	gen := encoder{r: r, end: d, tb: -1, tally: newTally(k)}
	var stubs []stub
	gen.stub = func(res uint64, s int, v uint64) error { stubs = append(stubs, stub{res: res, s: s, v: v}); return nil }
	require.NoError(t, gen.top(0, 0, 0, 0))
	var joinedAll, joinedNear uint64
	for _, st := range stubs {
		sections := [2]cert.Joins{}
		for i, f := range []*joinFinder{all, &near} {
			e := encoder{r: r, end: k, tb: k - levels, mask: 1<<levels - 1, table: table, tally: newTally(k)}
			jw := f.chunk(&e, st, d)
			rec := jw.AppendTo(nil)
			sections[i], err = cert.ParseJoins(rec, int(e.tally.open), 0)
			require.NoError(t, err)
		}
		joinedAll += uint64(len(sections[0].Delta))
		joinedNear += uint64(len(sections[1].Delta))
		for x, j := range sections[1].Joined {
			if j {
				require.True(t, sections[0].Joined[x], "stub %d: survivor %d joined by r - 1 only", st.res, x)
			}
		}
	}
	require.Less(t, joinedNear, joinedAll)
	t.Logf("k = %d: all residues give %d joins, r - 1 gives %d (misses %d)", k, joinedAll, joinedNear, joinedAll-joinedNear)
}
