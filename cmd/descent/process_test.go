package main

import (
	"bytes"
	"encoding/binary"
	"errors"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// Tests of the descent binary as a process: memory, kills, write errors
// and determinism, which an in-process call cannot show.

func buildBinary(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "descent")
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	require.NoError(t, err, "%s", out)
	return bin
}

type run struct {
	code           int
	stdout, stderr string
}

func runBinary(t *testing.T, bin string, env []string, args ...string) run {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	err := cmd.Run()
	r := run{stdout: out.String(), stderr: errb.String()}
	var exit *exec.ExitError
	if errors.As(err, &exit) {
		r.code = exit.ExitCode()
	} else {
		require.NoError(t, err)
	}
	return r
}

// peakRSS runs bin under GNU time and returns its peak resident memory in
// KiB. The rusage of a child started by os/exec cannot be used: the child
// shares the test's memory until it execs, and Linux counts that high
// water mark as the child's (under -race the test alone is 46 MB). GNU
// time forks the binary from its own small process. .ci/run installs it.
func peakRSS(t *testing.T, bin string, args ...string) (run, int64) {
	t.Helper()
	timeBin, err := exec.LookPath("/usr/bin/time")
	require.NoError(t, err, "GNU time (Debian package time) is needed to measure peak memory")
	report := filepath.Join(t.TempDir(), "rss")
	r := runBinary(t, timeBin, nil, append([]string{"-q", "-f", "%M", "-o", report, bin}, args...)...)
	b, err := os.ReadFile(report)
	require.NoError(t, err)
	kib, err := strconv.ParseInt(strings.TrimSpace(string(b)), 10, 64)
	require.NoError(t, err, "time reported %q", b)
	return r, kib
}

// hugeClaims returns 1 KiB files whose headers claim far more than they
// hold: k = j = 64 with the most records a sieve may have (a stored tree of
// 512 MiB), a range of 2^60 numbers in blocks of 2^4 (2^56 blocks), and a
// record said to be 2^60 bytes long.
func hugeClaims(t *testing.T, dir string) map[string]string {
	files := map[string]string{}
	put := func(name string, b []byte) {
		b = append(b, make([]byte, max(0, 1024-len(b)))...)
		p := filepath.Join(dir, name)
		require.NoError(t, os.WriteFile(p, b[:1024], 0o644))
		files[name] = p
	}
	body := binary.BigEndian.AppendUint32(nil, 3)
	body = binary.BigEndian.AppendUint32(body, 1)
	body = append(body, 64, 64)
	body = binary.BigEndian.AppendUint32(body, 100000)
	body = binary.BigEndian.AppendUint64(body, 1)
	body = append(body, make([]byte, 8*64)...)
	body = binary.BigEndian.AppendUint32(body, 0)
	pre := append([]byte("descent\x00\x01s"), 0, 0x80, 0, 1) // 2^23 + 1 records
	put("k64.dcert", append(binary.BigEndian.AppendUint32(pre, uint32(len(body))), body...))

	rb := binary.BigEndian.AppendUint32(nil, 3)
	rb = binary.BigEndian.AppendUint32(rb, 1)
	rb = append(rb, make([]byte, 32)...)
	rb = append(rb, 4, 4)
	rb = binary.BigEndian.AppendUint32(rb, 1000)
	rb = append(rb, 1, 1, 8, 0x10, 0, 0, 0, 0, 0, 0, 0) // lo = 1, hi = 2^60
	rb = append(rb, make([]byte, 6*16+4)...)
	rb = append(rb, 0, 0, 0, 0, 0, 0, 0, 0, 0)
	rpre := append([]byte("descent\x00\x01r"), 1, 0, 0, 0) // 2^24 records
	put("range-2^60.dcert", append(binary.BigEndian.AppendUint32(rpre, uint32(len(rb))), rb...))

	good, err := os.ReadFile(filepath.Join("..", "..", "testdata", "sieve-3n+1-k4.dcert"))
	require.NoError(t, err)
	long := bytes.Clone(good)
	binary.BigEndian.PutUint64(long[273+8:], 1<<60) // offsets start at 273: the end of record 0
	put("record-2^60.dcert", long)
	return files
}

func TestHugeClaimsFailFastInLittleMemory(t *testing.T) {
	bin := buildBinary(t)
	for name, path := range hugeClaims(t, t.TempDir()) {
		for _, cmd := range [][]string{{"check", path}, {"show", path}} {
			r, rss := peakRSS(t, bin, cmd...)
			require.Equal(t, exitUsage, r.code, "%s %s: %s", cmd[0], name, r.stdout+r.stderr)
			require.Contains(t, r.stdout+r.stderr, "offset", "%s %s names the offset", cmd[0], name)
			t.Logf("%s %s: peak RSS %d KiB", cmd[0], name, rss)
			require.Less(t, rss, int64(32<<10), "%s %s: peak RSS %d KiB", cmd[0], name, rss)
		}
	}
}

func TestKilledEmitLeavesNoCertificate(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	target := filepath.Join(dir, "sieve.dcert")
	rng := rand.New(rand.NewPCG(9, 9))
	finished := 0
	for i := range 12 {
		cmd := exec.Command(bin, "emit", "sieve", "-k", "34", "-o", target)
		require.NoError(t, cmd.Start())
		time.Sleep(time.Duration(rng.IntN(300)) * time.Millisecond)
		require.NoError(t, cmd.Process.Signal(syscall.SIGKILL))
		err := cmd.Wait()
		if err == nil { // it finished before the kill: then it must be whole
			finished++
			r := runBinary(t, bin, nil, "check", target)
			require.Equal(t, exitOK, r.code, "run %d finished but its certificate fails: %s", i, r.stdout)
			require.NoError(t, os.Remove(target))
			continue
		}
		_, statErr := os.Stat(target)
		require.True(t, os.IsNotExist(statErr), "run %d, killed: a file is at the target path", i)
	}
	require.Less(t, finished, 12, "every run finished before its kill: the test killed nothing")
	// What the kills leave behind are temporary files. None passes a
	// check, unless the kill fell in the last instant between the final
	// write and the rename: then it is the whole certificate, byte for byte.
	left, err := filepath.Glob(filepath.Join(dir, ".sieve.dcert.partial-*"))
	require.NoError(t, err)
	require.NotEmpty(t, left, "no kill left a temporary file to check")
	require.Equal(t, exitOK, runBinary(t, bin, nil, "emit", "sieve", "-k", "34", "-o", target).code)
	whole, err := os.ReadFile(target)
	require.NoError(t, err)
	for _, p := range left {
		r := runBinary(t, bin, nil, "check", p)
		if r.code == exitOK {
			b, err := os.ReadFile(p)
			require.NoError(t, err)
			require.True(t, bytes.Equal(whole, b), "the leftover %s passes a check but is not the certificate", p)
			continue
		}
		require.Contains(t, r.stdout, "not a descent certificate", "the leftover %s", p)
	}
}

func TestKilledRangeLeavesAJournalThatIsNoCertificate(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	sieve := filepath.Join(dir, "s.dcert")
	require.Equal(t, exitOK, runBinary(t, bin, nil, "emit", "sieve", "-k", "20", "-o", sieve).code)
	target := filepath.Join(dir, "r.dcert")
	cmd := exec.Command(bin, "emit", "range", "-sieve", sieve, "-from", "2^40", "-to", "2^40+2^30", "-block", "22", "-o", target)
	require.NoError(t, cmd.Start())
	time.Sleep(700 * time.Millisecond)
	require.NoError(t, cmd.Process.Signal(syscall.SIGKILL))
	require.Error(t, cmd.Wait(), "the range finished within 0.7 s: nothing was killed")
	_, err := os.Stat(target)
	require.True(t, os.IsNotExist(err), "a file is at the target path")
	r := runBinary(t, bin, nil, "check", "-sieve", sieve, target+".partial")
	require.Equal(t, exitUsage, r.code, "the journal: %s", r.stdout)
	require.Contains(t, r.stdout, "not a descent certificate")
	// The next run resumes from the journal.
	r = runBinary(t, bin, nil, "emit", "range", "-sieve", sieve, "-from", "2^40", "-to", "2^40+2^30", "-block", "22", "-o", target)
	require.Equal(t, exitOK, r.code, r.stderr)
	require.Contains(t, r.stderr, "resuming after")
	require.Equal(t, exitOK, runBinary(t, bin, nil, "check", "-sieve", sieve, target).code)
}

func TestWriteErrorsLeaveNoTarget(t *testing.T) {
	bin := buildBinary(t)
	cases := map[string]string{}
	if os.Geteuid() == 0 {
		// Root ignores permissions: use a full filesystem and an immutable
		// folder instead.
		full := filepath.Join(t.TempDir(), "full")
		require.NoError(t, os.Mkdir(full, 0o755))
		out, err := exec.Command("mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs", full).CombinedOutput()
		require.NoError(t, err, "mount a small tmpfs: %s", out)
		t.Cleanup(func() { exec.Command("umount", full).Run() })
		cases["full"] = full
		frozen := filepath.Join(t.TempDir(), "frozen")
		require.NoError(t, os.Mkdir(frozen, 0o755))
		out, err = exec.Command("chattr", "+i", frozen).CombinedOutput()
		require.NoError(t, err, "chattr +i: %s", out)
		t.Cleanup(func() { exec.Command("chattr", "-i", frozen).Run() })
		cases["read-only"] = frozen
	} else {
		ro := filepath.Join(t.TempDir(), "ro")
		require.NoError(t, os.Mkdir(ro, 0o555))
		cases["read-only"] = ro
	}
	for name, dir := range cases {
		target := filepath.Join(dir, "sieve.dcert")
		r := runBinary(t, bin, nil, "emit", "sieve", "-k", "28", "-o", target) // 630 KB: more than the tmpfs holds
		require.Equal(t, exitUsage, r.code, "%s: %s", name, r.stderr)
		require.True(t, strings.HasPrefix(r.stderr, "descent: emit sieve: "), "%s: %s", name, r.stderr)
		entries, err := os.ReadDir(dir)
		require.NoError(t, err)
		require.Empty(t, entries, "%s: the failed emit left files behind", name)
	}
}

func TestDeterministicAcrossGOMAXPROCS(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	outputs := map[string][]byte{}
	for _, procs := range []string{"1", "2", "8", "2"} {
		s := filepath.Join(dir, "s"+procs+".dcert")
		r := filepath.Join(dir, "r"+procs+".dcert")
		require.Equal(t, exitOK, runBinary(t, bin, []string{"GOMAXPROCS=" + procs}, "emit", "sieve", "-k", "24", "-o", s).code)
		require.Equal(t, exitOK, runBinary(t, bin, []string{"GOMAXPROCS=" + procs}, "emit", "range", "-sieve", s, "-from", "2^50", "-to", "2^50+2^26", "-o", r).code)
		for kind, p := range map[string]string{"sieve": s, "range": r} {
			b, err := os.ReadFile(p)
			require.NoError(t, err)
			if prev, ok := outputs[kind]; ok {
				require.True(t, bytes.Equal(prev, b), "GOMAXPROCS=%s changes the %s certificate", procs, kind)
			}
			outputs[kind] = b
		}
	}
}
