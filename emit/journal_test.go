package emit

import (
	"context"
	"errors"
	"math/big"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

// journaled runs p until n blocks are in the journal at path, then stops
// as an interrupted run does.
func journaled(t *testing.T, path string, p RangeParams, n int) {
	t.Helper()
	j, _, err := OpenJournal(path, p, nil)
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	_, err = Range(ctx, &memFile{}, p, RangeOptions{Workers: 1, Block: func(rec []byte) error {
		if err := j.Append(rec); err != nil {
			return err
		}
		if j.Blocks() == n {
			cancel()
		}
		return nil
	}})
	require.ErrorIs(t, err, context.Canceled)
	require.Equal(t, n, j.Blocks())
	require.NoError(t, j.Close())
}

func TestJournalOfAFailedRunBlocksNoOtherRun(t *testing.T) {
	sres, _ := emitSieve(t, cert.Collatz, 12, 12, Options{})
	p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: big.NewInt(1), Hi: big.NewInt(1 << 20), E: 14}
	require.NoError(t, NormalizeRange(&p))
	q := p
	q.E = 15
	dir := t.TempDir()

	// An interrupted run with other parameters: refused, and told whose
	// journal it is and how many blocks it holds; the journal is kept.
	path := filepath.Join(dir, "a.partial")
	journaled(t, path, p, 3)
	before, err := os.ReadFile(path)
	require.NoError(t, err)
	_, _, err = OpenJournal(path, q, nil)
	var conflict *JournalConflictError
	require.ErrorAs(t, err, &conflict)
	require.True(t, errors.Is(err, errJournalParams))
	require.Equal(t, 3, conflict.Blocks)
	require.Equal(t, "map 3n+1, from 1 to 1048576, blocks of 2^14, cap 100000, ceiling 2^128, 0 predecessor rules, sieve root "+sres.Root.String(), conflict.Run)
	after, err := os.ReadFile(path)
	require.NoError(t, err)
	require.Equal(t, before, after, "a refused run changed the journal")

	// The same run fails: its journal is kept and marked. The same
	// parameters resume from it, and are told that it failed.
	j, done, err := OpenJournal(path, p, nil)
	require.NoError(t, err)
	require.Len(t, done, 3)
	require.Empty(t, j.Failed)
	require.NoError(t, j.Fail("the disk is full"))
	j, done, err = OpenJournal(path, p, nil)
	require.NoError(t, err)
	require.Len(t, done, 3)
	require.Equal(t, "the disk is full", j.Failed)
	var f memFile
	_, err = Range(context.Background(), &f, p, RangeOptions{Done: done, Block: j.Append})
	require.NoError(t, err)
	var whole memFile
	_, err = Range(context.Background(), &whole, p, RangeOptions{})
	require.NoError(t, err)
	require.Equal(t, whole.b, f.b, "a run resumed after a failure writes other bytes")
	require.NoError(t, j.Remove())

	// A failed run's journal does not block a run with other parameters:
	// it is removed, and the new run starts afresh and says what it removed.
	journaled(t, path, p, 2)
	j, _, err = OpenJournal(path, p, nil)
	require.NoError(t, err)
	require.NoError(t, j.Fail("block 2 has too many undecided numbers"))
	j, done, err = OpenJournal(path, q, nil)
	require.NoError(t, err)
	require.Empty(t, done)
	require.Equal(t, conflict.Run+"; it failed: block 2 has too many undecided numbers", j.Discarded)
	require.NoError(t, j.Close())
	j, done, err = OpenJournal(path, q, nil) // now q's journal, interrupted
	require.NoError(t, err)
	require.Empty(t, done)
	require.Empty(t, j.Discarded)
	require.NoError(t, j.Close())

	// A failed run without completed blocks leaves no journal.
	empty := filepath.Join(dir, "b.partial")
	j, _, err = OpenJournal(empty, p, nil)
	require.NoError(t, err)
	require.NoError(t, j.Fail("the work limit"))
	_, err = os.Stat(empty)
	require.True(t, os.IsNotExist(err), "a failed run without blocks left its journal")
}

func TestJournalIsLockedAndOnlyARegularFile(t *testing.T) {
	sres, _ := emitSieve(t, cert.Collatz, 12, 12, Options{})
	p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: big.NewInt(1), Hi: big.NewInt(1 << 20), E: 14}
	require.NoError(t, NormalizeRange(&p))
	dir := t.TempDir()
	path := filepath.Join(dir, "r.partial")
	j, _, err := OpenJournal(path, p, nil)
	require.NoError(t, err)
	_, _, err = OpenJournal(path, p, nil)
	require.ErrorIs(t, err, ErrBusy, "a second run opened a journal in use")
	require.NoError(t, j.Close())

	// Not a journal: some other file, an earlier format, a link, a folder.
	other := filepath.Join(dir, "notes.partial")
	require.NoError(t, os.WriteFile(other, []byte("notes, not a journal"), 0o644))
	_, _, err = OpenJournal(other, p, nil)
	require.ErrorIs(t, err, ErrNotJournal)
	b, err := os.ReadFile(other)
	require.NoError(t, err)
	require.Equal(t, "notes, not a journal", string(b), "a file that is no journal was changed")

	old := filepath.Join(dir, "old.partial")
	require.NoError(t, os.WriteFile(old, append([]byte(journalMagicV1), make([]byte, 32)...), 0o644))
	_, _, err = OpenJournal(old, p, nil)
	var conflict *JournalConflictError
	require.ErrorAs(t, err, &conflict)
	require.True(t, conflict.Old)

	link := filepath.Join(dir, "link.partial")
	require.NoError(t, os.Symlink(other, link))
	_, _, err = OpenJournal(link, p, nil)
	require.ErrorIs(t, err, ErrNotJournal)
	folder := filepath.Join(dir, "folder.partial")
	require.NoError(t, os.Mkdir(folder, 0o755))
	_, _, err = OpenJournal(folder, p, nil)
	require.ErrorIs(t, err, ErrNotJournal)
}
