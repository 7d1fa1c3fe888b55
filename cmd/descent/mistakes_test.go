package main

import (
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/check"
)

func TestReadersMistakesExitTwo(t *testing.T) {
	// A range checked without its sieve, with another sieve, or a part
	// that names no record: the reader's mistake, exit 2, said on stderr
	// with a hint; never INVALID (exit 1) nor MALFORMED.
	dir := t.TempDir()
	s10, s12, r := filepath.Join(dir, "s10.dcert"), filepath.Join(dir, "s12.dcert"), filepath.Join(dir, "r.dcert")
	require.Equal(t, exitOK, first(runCLI("emit", "sieve", "-k", "10", "-o", s10)))
	require.Equal(t, exitOK, first(runCLI("emit", "sieve", "-k", "12", "-o", s12)))
	require.Equal(t, exitOK, first(runCLI("emit", "range", "-sieve", s12, "-to", "2^16", "-o", r)))
	rep := newChecker(check.Options{}, "", false).file(s12)
	require.NoError(t, rep.Err())
	for name, args := range map[string][]string{
		"no sieve":            {"check", r},
		"another sieve":       {"check", "-sieve", s10, r},
		"a part beyond":       {"check", "-part", "99", "-root", rep.Root, s12},
		"a share beyond":      {"check", "-part", "5/3", "-root", rep.Root, s12},
		"an unreadable sieve": {"check", "-sieve", filepath.Join(dir, "missing.dcert"), r},
	} {
		code, stdout, stderr := runCLI(args...)
		require.Equal(t, exitUsage, code, name)
		require.Empty(t, stdout, name)
		require.Regexp(t, `^descent: `, stderr, name)
		require.NotContains(t, stderr, "INVALID", name)
		require.NotContains(t, stderr, "MALFORMED", name)
	}
	code, stdout, _ := runCLI("check", "-json", r)
	require.Equal(t, exitUsage, code)
	require.Contains(t, stdout, `"reason":"sieve-missing"`)
	require.Contains(t, stdout, `"hint":"give that sieve certificate with -sieve FILE"`)
}

// A -root that the file does not have is the one failure with no claim of
// the file behind it: the report names the two roots and prints no empty
// claim line.
func TestAnotherRootPrintsBothRootsAndNoClaim(t *testing.T) {
	path := filepath.Join("..", "..", "testdata", "sieve-3n+1-k4.dcert")
	want := strings.Repeat("0", 64)
	code, stdout, _ := runCLI("check", "-root", want, path)
	require.Equal(t, exitInvalid, code, stdout)
	require.Contains(t, stdout, "\n  expected   "+want+"\n  found      ")
	require.NotContains(t, stdout, "claim")
}
