package main

import (
	"context"
	"math/big"
	"path/filepath"
	"regexp"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/emit"
)

// failedJournal leaves at out.partial the journal of a range run over
// [1, 2^20) in blocks of 2^14 on sieve that completed n blocks and then
// failed for why.
func failedJournal(t *testing.T, sieve, out string, n int, why string) {
	sh, root, err := readHeader(sieve)
	require.NoError(t, err)
	p := emit.RangeParams{Sieve: sh, SieveRoot: root, Lo: big.NewInt(1), Hi: big.NewInt(1 << 20), E: 14}
	require.NoError(t, emit.NormalizeRange(&p))
	j, _, err := emit.OpenJournal(out+".partial", p, nil)
	require.NoError(t, err)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	_, err = emit.Range(ctx, discardAt{}, p, emit.RangeOptions{Workers: 1, Block: func(rec []byte) error {
		if j.Blocks() == n {
			cancel()
			return nil
		}
		return j.Append(rec)
	}})
	require.Error(t, err)
	require.NoError(t, j.Fail(why))
}

type discardAt struct{}

func (discardAt) WriteAt(p []byte, _ int64) (int, error) { return len(p), nil }

func TestFailedRangeJournal(t *testing.T) {
	dir := t.TempDir()
	sieve, out := filepath.Join(dir, "s.dcert"), filepath.Join(dir, "r.dcert")
	code, _, stderr := runCLI("emit", "sieve", "-k", "12", "-o", sieve)
	require.Equal(t, exitOK, code, stderr)

	// The same arguments resume, and say that the earlier run failed.
	failedJournal(t, sieve, out, 3, "cannot write r.dcert: no space left on device")
	code, _, stderr = runCLI("emit", "range", "-sieve", sieve, "-to", "2^20", "-block", "14", "-o", out)
	require.Equal(t, exitOK, code, stderr)
	require.Equal(t, "descent: emit range: resuming after 3 completed blocks from "+out+".partial; the run that wrote them failed: cannot write r.dcert: no space left on device\n", stderr)

	// Other arguments are not blocked: the failed run's journal is
	// removed, and the message says whose it was.
	failedJournal(t, sieve, out, 2, "the work limit")
	code, _, stderr = runCLI("emit", "range", "-sieve", sieve, "-to", "2^20", "-block", "15", "-replace", "-o", out)
	require.Equal(t, exitOK, code, stderr)
	require.Regexp(t, "^descent: emit range: removed "+regexp.QuoteMeta(out)+`\.partial, the journal of an earlier run with other parameters that failed \(map 3n\+1, from 1 to 1048576, blocks of 2\^14, cap 100000, ceiling 2\^128, 0 predecessor rules, sieve root [0-9a-f]{64}; it failed: the work limit\)`+"\n$", stderr)
}
