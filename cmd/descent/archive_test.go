package main

import (
	"bytes"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// Certificates of testdata, made by 'descent emit'.
const (
	tdSieve12 = "../../testdata/sieve-3n+1-k12.dcert"
	tdRange20 = "../../testdata/range-3n+1-k12-to-2^20.dcert" // rests on tdSieve12
	tdSieve16 = "../../testdata/sieve-5n+1-k16.dcert"
)

// objectFile is where an archive keeps the certificate whose root check
// reports.
func objectFile(t *testing.T, dir, cert string, sieve ...string) string {
	t.Helper()
	args := []string{"check", "-json"}
	if len(sieve) > 0 {
		args = append(args, "-sieve", sieve[0])
	}
	code, out, errOut := runCLI(append(args, cert)...)
	require.Equal(t, exitOK, code, errOut)
	i := strings.Index(out, `"root":"`) + len(`"root":"`)
	root := out[i : i+64]
	return filepath.Join(dir, "objects", root[:2], root+".dcert")
}

// Damage an archived file, delete one, delete the index: each ends with a
// clear message, exit 1, and nothing lost.
func TestArchiveDamageAndLossThroughTheCLI(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "arch")
	code, _, errOut := runCLI("archive", "add", dir, tdSieve12, tdRange20, tdSieve16)
	require.Equal(t, exitOK, code, errOut)
	rangeObj := objectFile(t, dir, tdRange20, tdSieve12)
	sieveObj := objectFile(t, dir, tdSieve16)
	good, err := os.ReadFile(rangeObj)
	require.NoError(t, err)

	// A flipped bit in the range's last block.
	require.NoError(t, os.Chmod(rangeObj, 0o644))
	b := bytes.Clone(good)
	b[len(b)-5] ^= 1
	require.NoError(t, os.WriteFile(rangeObj, b, 0o644))
	code, out, errOut := runCLI("archive", "verify", dir)
	require.Equal(t, exitInvalid, code)
	require.Contains(t, errOut, "descent: archive verify: "+rangeObj+": damaged: invalid (hash): ")
	require.Contains(t, errOut, "block 63 hashes to")
	require.Contains(t, errOut, "hint: restore damaged or missing files from another copy")
	require.Contains(t, out, dir+": 3 entries, 2 ok, 1 damaged\n")
	// find still answers from the index; the file is not removed.
	code, out, _ = runCLI("archive", "find", dir, "-covers", "1000")
	require.Equal(t, exitOK, code)
	require.Contains(t, out, rangeObj)

	// Adding a good copy puts it back.
	code, out, errOut = runCLI("archive", "add", dir, tdRange20)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "stored as")
	restored, err := os.ReadFile(rangeObj)
	require.NoError(t, err)
	require.Equal(t, good, restored)

	// A deleted file.
	require.NoError(t, os.Remove(sieveObj))
	code, out, errOut = runCLI("archive", "verify", dir)
	require.Equal(t, exitInvalid, code)
	require.Contains(t, errOut, ": missing: the index lists it, but its file is gone")
	require.Contains(t, out, "1 missing")
	code, _, errOut = runCLI("archive", "add", dir, tdSieve16)
	require.Equal(t, exitOK, code, errOut)

	// A deleted index.
	require.NoError(t, os.Remove(filepath.Join(dir, "index.db")))
	for _, args := range [][]string{{"find", dir}, {"add", dir, tdSieve12}} {
		code, _, errOut = runCLI(append([]string{"archive"}, args...)...)
		require.Equal(t, exitInvalid, code, "%v", args)
		require.Contains(t, errOut, "the index is missing or damaged: "+filepath.Join(dir, "index.db")+" is missing")
		require.Contains(t, errOut, "hint: 'descent archive verify -reindex "+dir+"' rebuilds the index")
	}
	code, out, errOut = runCLI("archive", "verify", dir)
	require.Equal(t, exitInvalid, code)
	require.Contains(t, out, "3 entries, 3 not indexed")
	code, out, errOut = runCLI("archive", "verify", "-reindex", dir)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "3 entries, 3 ok; index rebuilt with 3 entries")
	code, out, _ = runCLI("archive", "find", "-json", dir)
	require.Equal(t, exitOK, code)
	require.Equal(t, 3, strings.Count(out, "\n"))
	code, _, _ = runCLI("archive", "verify", dir)
	require.Equal(t, exitOK, code)
}

// buildKillable builds descent with the archivekill tag, whose archive add
// can be told (DESCENT_ARCHIVE_PAUSE) to stop at a named point.
func buildKillable(t *testing.T) string { return buildBinary(t, "archivekill") }

// waitFor polls until cond holds or the process ends; it fails the test
// if the process ended first.
func waitFor(t *testing.T, cmd *exec.Cmd, done <-chan error, what string, cond func() bool) {
	t.Helper()
	for {
		if cond() {
			return
		}
		select {
		case err := <-done:
			t.Fatalf("the process ended (%v) before %s", err, what)
		case <-time.After(2 * time.Millisecond):
		}
	}
}

// TestArchiveKilledAdd kills the real binary with SIGKILL at each point of
// an add's writes, and once while it checks a large certificate. Each time
// the archive holds only whole files and entries, the next command cleans
// up and says so, nothing stored before is lost, and the same add run
// again completes.
func TestArchiveKilledAdd(t *testing.T) {
	bin := buildKillable(t)
	src := t.TempDir()
	files := map[string]string{}
	for _, p := range []string{tdSieve12, tdRange20, tdSieve16} {
		b, err := os.ReadFile(p)
		require.NoError(t, err)
		files[filepath.Base(p)] = string(b)
		require.NoError(t, os.WriteFile(filepath.Join(src, filepath.Base(p)), b, 0o644))
	}
	sieve, rng, earlier := filepath.Join(src, filepath.Base(tdSieve12)), filepath.Join(src, filepath.Base(tdRange20)), filepath.Join(src, filepath.Base(tdSieve16))

	type killPoint struct {
		pause   string // "" for a kill while the check runs
		cleaned string // what the next command says it cleaned up
		stored  int    // entries stored after the cleanup
	}
	points := []killPoint{
		{"staged", "0 entries completed, 0 entries undone, 2 temporary files removed", 1},
		{"checked", "0 entries completed, 0 entries undone, 2 temporary files removed", 1},
		{"pending", "0 entries completed, 2 entries undone, 2 temporary files removed", 1},
		{"renamed", "1 entry completed, 1 entry undone, 1 temporary file removed", 2},
		{"marking", "2 entries completed, 0 entries undone, 0 temporary files removed", 3},
	}
	var big string
	if !testing.Short() {
		// A range whose check takes long enough to be caught in the act.
		big = filepath.Join(src, "big.dcert")
		r := runBinary(t, bin, nil, "emit", "range", "-sieve", sieve, "-from", "2^40", "-to", "2^40+2^27", "-o", big)
		require.Zero(t, r.code, r.stderr)
		points = append(points, killPoint{"", "0 entries completed, 0 entries undone, 2 temporary files removed", 1})
	}

	for _, p := range points {
		name := p.pause
		if name == "" {
			name = "while-checking"
		}
		t.Run(name, func(t *testing.T) {
			dir := filepath.Join(t.TempDir(), "arch")
			r := runBinary(t, bin, nil, "archive", "add", dir, earlier)
			require.Zero(t, r.code, r.stderr)

			second := rng
			env := os.Environ()
			if p.pause != "" {
				env = append(env, "DESCENT_ARCHIVE_PAUSE="+p.pause)
			} else {
				second = big
			}
			cmd := exec.Command(bin, "archive", "add", dir, sieve, second)
			cmd.Env = env
			stderr := &lockedBuffer{}
			cmd.Stderr = stderr
			require.NoError(t, cmd.Start())
			done := make(chan error, 1)
			go func() { done <- cmd.Wait() }()
			if p.pause != "" {
				waitFor(t, cmd, done, "it paused", func() bool { return strings.Contains(stderr.String(), "paused at "+p.pause) })
			} else {
				// Both copies are staged in full, so the check has begun.
				fi, err := os.Stat(big)
				require.NoError(t, err)
				waitFor(t, cmd, done, "its copies were staged", func() bool {
					es, _ := os.ReadDir(filepath.Join(dir, "tmp"))
					for _, e := range es {
						if info, err := e.Info(); err == nil && info.Size() == fi.Size() {
							return true
						}
					}
					return false
				})
			}
			require.NoError(t, cmd.Process.Signal(syscall.SIGKILL))
			err := <-done
			var exit *exec.ExitError
			require.True(t, errors.As(err, &exit) && !exit.Exited(), "killed by a signal: %v", err)

			if p.pause == "marking" {
				_, err := os.Stat(filepath.Join(dir, "index.db-journal"))
				require.NoError(t, err, "the kill came inside a transaction, whose journal is left")
			}
			// Nothing half-written: every file under objects/ is one of the
			// certificates, whole.
			objs, _ := filepath.Glob(filepath.Join(dir, "objects", "*", "*"))
			for _, o := range objs {
				b, err := os.ReadFile(o)
				require.NoError(t, err)
				found := false
				for _, f := range files {
					found = found || f == string(b)
				}
				require.True(t, found, "%s is a whole certificate", o)
			}

			r = runBinary(t, bin, nil, "archive", "verify", dir)
			require.Zero(t, r.code, "%s%s", r.stdout, r.stderr)
			require.Contains(t, r.stderr, "descent: archive verify: "+dir+": cleaned up after an interrupted add: "+p.cleaned)
			require.Contains(t, r.stdout, dir+": "+count(p.stored, "entry", "entries")+", ")
			left, _ := os.ReadDir(filepath.Join(dir, "tmp"))
			require.Empty(t, left)

			r = runBinary(t, bin, nil, "archive", "add", dir, sieve, rng)
			require.Zero(t, r.code, r.stderr)
			r = runBinary(t, bin, nil, "archive", "verify", dir)
			require.Zero(t, r.code, r.stderr)
			require.Contains(t, r.stdout, dir+": 3 entries, 3 ok\n")
		})
	}
}

// Two processes never use one archive at once: the second waits.
func TestArchiveWaitsForTheLock(t *testing.T) {
	bin := buildKillable(t)
	dir := filepath.Join(t.TempDir(), "arch")
	cmd := exec.Command(bin, "archive", "add", dir, tdSieve12)
	cmd.Env = append(os.Environ(), "DESCENT_ARCHIVE_PAUSE=checked")
	stderr := &lockedBuffer{}
	cmd.Stderr = stderr
	require.NoError(t, cmd.Start())
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()
	waitFor(t, cmd, done, "it paused", func() bool { return strings.Contains(stderr.String(), "paused at checked") })

	second := exec.Command(bin, "archive", "find", dir)
	second2 := &lockedBuffer{}
	second.Stderr = second2
	require.NoError(t, second.Start())
	secondDone := make(chan error, 1)
	go func() { secondDone <- second.Wait() }()
	waitFor(t, second, secondDone, "it said it waits", func() bool {
		return strings.Contains(second2.String(), "waiting for another descent using the archive")
	})
	require.NoError(t, cmd.Process.Signal(syscall.SIGKILL))
	<-done
	require.NoError(t, <-secondDone, "the second runs once the first is gone")
	require.Contains(t, second2.String(), "cleaned up after an interrupted add")
}

func TestKeyNewModes(t *testing.T) {
	base := filepath.Join(t.TempDir(), "alice")
	code, _, errOut := runCLI("key", "new", "-o", base)
	require.Equal(t, exitOK, code, errOut)
	for path, mode := range map[string]os.FileMode{base + ".key": 0o600, base + ".pub": 0o644} {
		fi, err := os.Stat(path)
		require.NoError(t, err)
		require.Equal(t, mode, fi.Mode().Perm(), path)
	}
	// Either half existing is enough to refuse, and nothing is touched.
	other := filepath.Join(t.TempDir(), "bob")
	require.NoError(t, os.WriteFile(other+".pub", []byte("mine\n"), 0o644))
	code, _, errOut = runCLI("key", "new", "-o", other)
	require.Equal(t, exitUsage, code)
	require.Contains(t, errOut, other+".pub exists; a key is never overwritten")
	_, err := os.Stat(other + ".key")
	require.True(t, os.IsNotExist(err))
	b, _ := os.ReadFile(other + ".pub")
	require.Equal(t, "mine\n", string(b))
}
