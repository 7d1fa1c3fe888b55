package archive_test

import (
	"bytes"
	"database/sql"
	"errors"
	"fmt"
	"math/big"
	mrand "math/rand"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"descent/archive"
	"descent/check"
	"descent/check/kernel"

	"github.com/stretchr/testify/require"
)

// The certificates committed under testdata, each made by 'descent emit'.
const (
	sieve12 = "../testdata/sieve-3n+1-k12.dcert"
	range20 = "../testdata/range-3n+1-k12-to-2^20.dcert" // rests on sieve12
	sieve16 = "../testdata/sieve-5n+1-k16.dcert"
	sieveM1 = "../testdata/sieve-3n-1-k12.dcert"
	rangeM1 = "../testdata/range-3n-1-k12-to-10^5.dcert" // rests on sieveM1
)

// realCheck is a CheckFunc on package check, the real checker, with the
// sieve of a range found by the archive.
func realCheck(s archive.Subject) (archive.Verdict, error) {
	var sieveErr error
	o := check.Options{}
	o.Draw = check.Sample(s.Sample, "")
	o.Sieve = func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
		path, err := s.Sieve(named.String())
		var b []byte
		if err == nil {
			b, err = os.ReadFile(path)
		}
		if err != nil {
			sieveErr = err
			return nil, &kernel.Failure{Class: kernel.ErrUsage, Reason: kernel.ReasonSieveMissing, Msg: err.Error()}
		}
		return check.RangeSieve(bytes.NewReader(b), int64(len(b)), path, named, check.Options{})
	}
	res := check.Check(s.R, s.Size, o)
	if sieveErr != nil {
		return archive.Verdict{}, sieveErr
	}
	if err := res.Err(); err != nil {
		if errors.Is(err, kernel.ErrInvalid) {
			return archive.Verdict{}, fmt.Errorf("%w: %v", archive.ErrInvalid, err)
		}
		return archive.Verdict{}, fmt.Errorf("%w: %v", archive.ErrMalformed, err)
	}
	v := archive.Verdict{Root: res.Root.String(), Kind: "sieve"}
	if h := res.File.Sieve; h != nil {
		v.Map, v.K, v.J = h.Map.String(), h.K, h.J
	} else {
		h := res.File.Range
		v.Kind, v.Map, v.K, v.Lo, v.Hi, v.SieveRoot = "range", h.Map.String(), h.K, h.Lo.String(), h.Hi.String(), h.SieveRoot.String()
	}
	v.Claim = "a " + v.Kind + " claim"
	if a := res.Audit; a != nil {
		v.Audit = fmt.Sprintf("audit of %d of %d blocks", len(a.Drawn), a.Blocks)
	}
	return v, nil
}

func open(t *testing.T, dir string, create bool) *archive.Store {
	t.Helper()
	s, err := archive.Open(dir, archive.Options{Create: create, Check: realCheck})
	require.NoError(t, err)
	t.Cleanup(func() { s.Close() })
	return s
}

func roots(es []archive.Entry) []string {
	var out []string
	for _, e := range es {
		out = append(out, e.Root)
	}
	sort.Strings(out)
	return out
}

// rootOf is the root check finds for a committed certificate.
func rootOf(t *testing.T, path string) string {
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	o := check.Options{}
	if sieve := map[string]string{range20: sieve12, rangeM1: sieveM1}[path]; sieve != "" {
		o.Sieve = func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
			sb, err := os.ReadFile(sieve)
			require.NoError(t, err)
			return check.RangeSieve(bytes.NewReader(sb), int64(len(sb)), sieve, named, check.Options{})
		}
	}
	res := check.Check(bytes.NewReader(b), int64(len(b)), o)
	require.NoError(t, res.Err(), path)
	return res.Root.String()
}

func TestArchiveAddFindVerify(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "a")
	s := open(t, dir, true)
	// The range comes before its sieve: the add checks it once the sieve is.
	added, err := s.Add([]string{range20, sieve12, sieve16})
	require.NoError(t, err)
	require.Len(t, added, 3)
	for _, a := range added {
		require.False(t, a.Already)
		require.Equal(t, rootOf(t, a.File), a.Verdict.Root)
		b, err := os.ReadFile(filepath.Join(dir, filepath.FromSlash(a.Path)))
		require.NoError(t, err)
		src, err := os.ReadFile(a.File)
		require.NoError(t, err)
		require.Equal(t, src, b, "the archive keeps the bytes it was given")
	}

	all, err := s.Find(archive.Query{})
	require.NoError(t, err)
	require.Equal(t, roots(all), roots(sliceOf(added)))

	// [1, 2^20) covers 2^19 and 2^20 - 1, not 2^20; sieves cover nothing.
	for _, c := range []struct {
		q    archive.Query
		want []string
	}{
		{archive.Query{Covers: "524288"}, []string{rootOf(t, range20)}},
		{archive.Query{Covers: "1048575", Map: "3n+1"}, []string{rootOf(t, range20)}},
		{archive.Query{Covers: "1"}, []string{rootOf(t, range20)}},
		{archive.Query{Covers: "1048576"}, nil},
		{archive.Query{Covers: "524288", Map: "5n+1"}, nil},
		{archive.Query{Kind: "sieve"}, []string{rootOf(t, sieve12), rootOf(t, sieve16)}},
		{archive.Query{Kind: "sieve", Map: "5n+1"}, []string{rootOf(t, sieve16)}},
	} {
		es, err := s.Find(c.q)
		require.NoError(t, err)
		want := append([]string(nil), c.want...)
		sort.Strings(want)
		require.Equal(t, want, roots(es), "%+v", c.q)
	}

	sum, err := s.Verify(archive.VerifyOptions{})
	require.NoError(t, err)
	require.Equal(t, 3, sum.Count[archive.OK])
	require.Zero(t, sum.Problems())
}

func sliceOf(as []archive.Added) []archive.Entry {
	var es []archive.Entry
	for _, a := range as {
		es = append(es, archive.Entry{Verdict: a.Verdict})
	}
	return es
}

func TestArchiveSameRootTwiceIsANoOp(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieve12})
	require.NoError(t, err)
	obj := filepath.Join(dir, "objects", rootOf(t, sieve12)[:2], rootOf(t, sieve12)+".dcert")
	before, err := os.Stat(obj)
	require.NoError(t, err)

	copyPath := filepath.Join(t.TempDir(), "copy.dcert")
	b, _ := os.ReadFile(sieve12)
	require.NoError(t, os.WriteFile(copyPath, b, 0o644))
	added, err := s.Add([]string{copyPath, sieve12})
	require.NoError(t, err)
	require.True(t, added[0].Already)
	require.Equal(t, copyPath, added[1].SameAs)
	after, err := os.Stat(obj)
	require.NoError(t, err)
	require.Equal(t, before.ModTime(), after.ModTime(), "the stored file is not rewritten")
	es, err := s.Find(archive.Query{})
	require.NoError(t, err)
	require.Len(t, es, 1)
}

// An add with one bad file stores nothing: no file, no entry, no
// temporary left behind.
func TestArchiveRefusesAndStoresNothing(t *testing.T) {
	dir := t.TempDir()
	b, err := os.ReadFile(sieve16)
	require.NoError(t, err)
	bad := filepath.Join(t.TempDir(), "bad.dcert")
	b[len(b)-1] ^= 1 // a code bit of the last chunk: its hash no longer matches
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	notCert := filepath.Join(t.TempDir(), "notes.txt")
	require.NoError(t, os.WriteFile(notCert, []byte("not a certificate\n"), 0o644))

	s := open(t, dir, true)
	_, err = s.Add([]string{sieve12, bad, notCert, rangeM1})
	var refused *archive.RefusedError
	require.ErrorAs(t, err, &refused)
	require.Len(t, refused.Refused, 3)
	require.ErrorIs(t, refused.Refused[0].Err, archive.ErrInvalid)
	require.ErrorIs(t, refused.Refused[1].Err, archive.ErrMalformed)
	var missing *archive.SieveMissingError
	require.ErrorAs(t, refused.Refused[2].Err, &missing)
	require.Equal(t, rootOf(t, sieveM1), missing.Root)

	es, err := s.Find(archive.Query{})
	require.NoError(t, err)
	require.Empty(t, es)
	for _, sub := range []string{"objects", "tmp"} {
		left, err := os.ReadDir(filepath.Join(dir, sub))
		require.NoError(t, err)
		require.Empty(t, left, sub)
	}
}

func TestArchiveVerifyNamesDamagedMissingAndStray(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieveM1, rangeM1, sieve16, sieve12})
	require.NoError(t, err)

	damaged := filepath.Join(dir, "objects", rootOf(t, rangeM1)[:2], rootOf(t, rangeM1)+".dcert")
	require.NoError(t, os.Chmod(damaged, 0o644))
	b, err := os.ReadFile(damaged)
	require.NoError(t, err)
	b[len(b)/2] ^= 0x10
	require.NoError(t, os.WriteFile(damaged, b, 0o644))
	require.NoError(t, os.Remove(filepath.Join(dir, "objects", rootOf(t, sieve16)[:2], rootOf(t, sieve16)+".dcert")))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "objects", "notes.txt"), []byte("x"), 0o644))

	got := map[archive.Status][]string{}
	sum, err := s.Verify(archive.VerifyOptions{Report: func(r archive.Result) {
		got[r.Status] = append(got[r.Status], r.Path)
		if r.Status != archive.OK {
			require.Error(t, r.Err)
		}
	}})
	require.NoError(t, err)
	require.Equal(t, 3, sum.Problems())
	require.Equal(t, []string{"objects/" + rootOf(t, rangeM1)[:2] + "/" + rootOf(t, rangeM1) + ".dcert"}, got[archive.Damaged])
	require.Equal(t, []string{"objects/" + rootOf(t, sieve16)[:2] + "/" + rootOf(t, sieve16) + ".dcert"}, got[archive.Missing])
	require.Equal(t, []string{"objects/notes.txt"}, got[archive.Stray])
	require.Len(t, got[archive.OK], 2)

	// Putting a good copy back repairs the entry.
	_, err = s.Add([]string{rangeM1, sieve16})
	require.NoError(t, err)
	require.NoError(t, os.Remove(filepath.Join(dir, "objects", "notes.txt")))
	sum, err = s.Verify(archive.VerifyOptions{})
	require.NoError(t, err)
	require.Zero(t, sum.Problems())
}

// A deleted index: find and add say so; verify re-checks the files and
// says the index is gone; verify -reindex rebuilds it with the same facts.
func TestArchiveIndexLostAndRebuilt(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieve12, range20, sieve16})
	require.NoError(t, err)
	before, err := s.Find(archive.Query{})
	require.NoError(t, err)
	require.NoError(t, s.Close())
	require.NoError(t, os.Remove(filepath.Join(dir, "index.db")))

	s = open(t, dir, false)
	_, err = s.Find(archive.Query{})
	require.ErrorIs(t, err, archive.ErrIndex)
	_, err = s.Add([]string{sieve12})
	require.ErrorIs(t, err, archive.ErrIndex)
	sum, err := s.Verify(archive.VerifyOptions{})
	require.NoError(t, err)
	require.ErrorIs(t, sum.IndexErr, archive.ErrIndex)
	require.Equal(t, 3, sum.Count[archive.Unindexed])

	sum, err = s.Verify(archive.VerifyOptions{Reindex: true})
	require.NoError(t, err)
	require.Zero(t, sum.Problems())
	require.Equal(t, 3, sum.Reindexed)
	after, err := s.Find(archive.Query{})
	require.NoError(t, err)
	require.Len(t, after, len(before))
	for i := range before {
		require.Equal(t, before[i].Verdict, after[i].Verdict)
		require.Equal(t, before[i].Path, after[i].Path)
		require.Equal(t, before[i].Size, after[i].Size)
	}

	// A damaged index (garbage bytes) is the same case.
	require.NoError(t, s.Close())
	require.NoError(t, os.WriteFile(filepath.Join(dir, "index.db"), []byte("this is no database, and it is long enough to look like a header of one"), 0o644))
	s = open(t, dir, false)
	_, err = s.Find(archive.Query{})
	require.ErrorIs(t, err, archive.ErrIndex)
	sum, err = s.Verify(archive.VerifyOptions{Reindex: true})
	require.NoError(t, err)
	require.Equal(t, 3, sum.Reindexed)
}

// An add stopped at each point of its writes: the next Open settles it,
// and the archive holds each file whole or not at all. A panic unwinds
// Add, whose deferred cleanup then empties tmp/ and rolls back an open
// transaction; a kill does neither, which the process tests in
// cmd/descent show with the real binary and SIGKILL.
func TestArchiveRecoversAnAddStoppedAtEachPoint(t *testing.T) {
	type stop struct{ point string }
	for _, point := range []string{"staged", "checked", "pending", "renamed", "marking"} {
		t.Run(point, func(t *testing.T) {
			dir := t.TempDir()
			s, err := archive.Open(dir, archive.Options{Create: true, Check: realCheck, Pause: func(p string) {
				if p == point {
					panic(stop{p})
				}
			}})
			require.NoError(t, err)
			func() {
				defer func() { require.Equal(t, stop{point}, recover()) }()
				s.Add([]string{sieve12, range20})
			}()
			s.Close() // what the kernel does for a killed process: the lock goes

			s = open(t, dir, false)
			r := s.Recovered
			switch point {
			case "staged", "checked":
				require.Equal(t, archive.Recovery{}, r)
			case "pending":
				require.Equal(t, archive.Recovery{Undone: 2}, r)
			case "renamed":
				require.Equal(t, archive.Recovery{Completed: 1, Undone: 1}, r)
			case "marking":
				require.Equal(t, archive.Recovery{Completed: 2}, r)
			}
			sum, err := s.Verify(archive.VerifyOptions{})
			require.NoError(t, err)
			require.Zero(t, sum.Problems())
			added, err := s.Add([]string{sieve12, range20})
			require.NoError(t, err)
			require.Len(t, added, 2)
			es, err := s.Find(archive.Query{})
			require.NoError(t, err)
			require.Equal(t, []string{rootOf(t, range20), rootOf(t, sieve12)}, sortedRoots(es))
		})
	}
}

func sortedRoots(es []archive.Entry) []string { return roots(es) }

func TestArchiveOpenRefusesOtherDirectories(t *testing.T) {
	dir := t.TempDir()
	_, err := archive.Open(dir, archive.Options{})
	require.ErrorIs(t, err, archive.ErrNotArchive)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "thesis.tex"), []byte("x"), 0o644))
	_, err = archive.Open(dir, archive.Options{Create: true, Check: realCheck})
	require.ErrorIs(t, err, archive.ErrNotArchive, "a non-empty directory is never made an archive")
	left, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, left, 1, "and nothing is written into it")
}

// Audits: verify -sample re-derives some blocks of each range and says so.
func TestArchiveVerifySampled(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieve12, range20})
	require.NoError(t, err)
	var audits []string
	_, err = s.Verify(archive.VerifyOptions{Sample: 2, Report: func(r archive.Result) {
		require.Equal(t, archive.OK, r.Status, "%v", r.Err)
		audits = append(audits, r.Verdict.Audit)
	}})
	require.NoError(t, err)
	require.Equal(t, []string{"", "audit of 2 of 64 blocks"}, audits, "the sieve in full, 2 of the 2^20/2^14 blocks of the range")
	es, err := s.Find(archive.Query{Kind: "range"})
	require.NoError(t, err)
	require.Equal(t, "audit of 2 of 64 blocks", es[0].CheckMode)
}

// The index compares bounds by a text key; math/big, as a plain reference,
// must order any two numbers the same way, however many digits they have.
func TestArchiveBoundKeysOrderAsNumbers(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieve12, range20})
	require.NoError(t, err)
	rng := mrand.New(mrand.NewSource(7))
	lo, hi := big.NewInt(1), big.NewInt(1<<20)
	for range 300 {
		n := new(big.Int).Rand(rng, new(big.Int).Lsh(big.NewInt(1), uint(rng.Intn(200)+1)))
		n.Add(n, big.NewInt(1))
		es, err := s.Find(archive.Query{Covers: n.String()})
		require.NoError(t, err)
		want := n.Cmp(lo) >= 0 && n.Cmp(hi) < 0
		require.Equal(t, want, len(es) == 1, "covers %s", n)
	}
}

// An index that says something else of a good file is named, and
// rebuilt; a user's sqlite3 session could have done this.
func TestArchiveMisindexed(t *testing.T) {
	dir := t.TempDir()
	s := open(t, dir, true)
	_, err := s.Add([]string{sieve12, range20})
	require.NoError(t, err)
	require.NoError(t, s.Close())

	db, err := sql.Open("sqlite", filepath.Join(dir, "index.db"))
	require.NoError(t, err)
	_, err = db.Exec(`UPDATE certificates SET hi = '2097152', hi_key = printf('%04d:%s', 7, '2097152') WHERE kind = 'range'`)
	require.NoError(t, err)
	require.NoError(t, db.Close())

	s = open(t, dir, false)
	es, err := s.Find(archive.Query{Covers: "2000000"})
	require.NoError(t, err)
	require.Len(t, es, 1, "find answers from the index, as altered")
	var msgs []string
	sum, err := s.Verify(archive.VerifyOptions{Report: func(r archive.Result) {
		if r.Status == archive.Misindexed {
			msgs = append(msgs, r.Err.Error())
		}
	}})
	require.NoError(t, err)
	require.Equal(t, 1, sum.Count[archive.Misindexed])
	require.Equal(t, []string{"the index says hi 2097152 where the file has 1048576"}, msgs)

	_, err = s.Verify(archive.VerifyOptions{Reindex: true})
	require.NoError(t, err)
	es, err = s.Find(archive.Query{Covers: "2000000"})
	require.NoError(t, err)
	require.Empty(t, es)
}
