package main

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// Tests of the descent binary as a process: memory, kills, write errors
// and determinism, which an in-process call cannot show.

// buildBinary builds descent once for all the tests of the process (in
// binDir, which TestMain removes at the end), with the given build tags.
func buildBinary(t *testing.T, tags ...string) string {
	t.Helper()
	built.Lock()
	defer built.Unlock()
	name := strings.Join(append([]string{"descent"}, tags...), "-")
	if built.bins == nil {
		dir, err := os.MkdirTemp("", "descent-test-")
		require.NoError(t, err)
		built.dir, built.bins = dir, map[string]string{}
	}
	if bin, ok := built.bins[name]; ok {
		return bin
	}
	bin := filepath.Join(built.dir, name)
	out, err := exec.Command("go", "build", "-tags", strings.Join(tags, ","), "-o", bin, ".").CombinedOutput()
	require.NoError(t, err, "%s", out)
	built.bins[name] = bin
	return bin
}

var built struct {
	sync.Mutex
	dir  string
	bins map[string]string // by name: descent, descent-archivekill
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

// started is a descent process running in the background.
type started struct {
	cmd            *exec.Cmd
	stdout, stderr lockedBuffer
	done           chan struct{}
	err            error
}

// lockedBuffer is a bytes.Buffer that the goroutine copying a process's
// output and the test may use at once: a failure message reads it while
// the process still writes.
type lockedBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *lockedBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *lockedBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

func start(t *testing.T, bin string, args ...string) *started {
	t.Helper()
	p := &started{cmd: exec.Command(bin, args...), done: make(chan struct{})}
	p.cmd.Stdout, p.cmd.Stderr = &p.stdout, &p.stderr
	require.NoError(t, p.cmd.Start())
	go func() { p.err = p.cmd.Wait(); close(p.done) }()
	t.Cleanup(func() { p.cmd.Process.Kill(); <-p.done })
	return p
}

// until polls cond while the process runs, and returns whether it came
// true before the process ended. It waits on the process, not on the
// clock, so that it does not depend on the machine's speed; the deadline
// only stops a test that would hang.
func (p *started) until(t *testing.T, cond func() bool) bool {
	t.Helper()
	deadline := time.Now().Add(5 * time.Minute)
	for !cond() {
		select {
		case <-p.done:
			return cond()
		case <-time.After(2 * time.Millisecond):
		}
		require.True(t, time.Now().Before(deadline), "the condition did not come true in 5 minutes")
	}
	return true
}

// stop sends sig and returns the exit status (-1 if the signal ended the
// process).
func (p *started) stop(t *testing.T, sig syscall.Signal) int {
	t.Helper()
	require.NoError(t, p.cmd.Process.Signal(sig))
	<-p.done
	var exit *exec.ExitError
	if errors.As(p.err, &exit) {
		return exit.ExitCode()
	}
	require.NoError(t, p.err)
	return 0
}

// leftovers returns the temporary files of runs to target.
func leftovers(t *testing.T, target string) []string {
	t.Helper()
	left, err := filepath.Glob(filepath.Join(filepath.Dir(target), "."+filepath.Base(target)+".tmp-*"))
	require.NoError(t, err)
	return left
}

// bigLeftover reports whether a temporary file of target holds at least
// 1 MiB: the run is well under way.
func bigLeftover(t *testing.T, target string) func() bool {
	return func() bool {
		for _, p := range leftovers(t, target) {
			if fi, err := os.Stat(p); err == nil && fi.Size() >= 1<<20 {
				return true
			}
		}
		return false
	}
}

func TestKilledEmitLeavesNoCertificate(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	target := filepath.Join(dir, "sieve.dcert")
	require.Equal(t, exitOK, runBinary(t, bin, nil, "emit", "sieve", "-k", "34", "-o", filepath.Join(dir, "whole.dcert")).code)
	whole, err := os.ReadFile(filepath.Join(dir, "whole.dcert"))
	require.NoError(t, err)
	rng := rand.New(rand.NewPCG(9, 9))
	finished, killed := 0, 0
	for i := range 12 {
		// Each run is killed at a state drawn at random, not after a time:
		// at once, or once its temporary file holds a random share of the
		// certificate's bytes, so that the test does not depend on the
		// machine's speed.
		p := start(t, bin, "emit", "sieve", "-k", "34", "-o", target)
		if at := rng.Int64N(int64(len(whole))); i%4 != 0 {
			p.until(t, func() bool {
				for _, l := range leftovers(t, target) {
					if fi, err := os.Stat(l); err == nil && fi.Size() > at {
						return true
					}
				}
				return false
			})
		}
		p.cmd.Process.Signal(syscall.SIGKILL) // an error: it has finished
		<-p.done
		if p.err == nil { // it finished before the kill: then it must be whole
			finished++
			r := runBinary(t, bin, nil, "check", target)
			require.Equal(t, exitOK, r.code, "run %d finished but its certificate fails: %s", i, r.stdout)
			require.NoError(t, os.Remove(target))
			continue
		}
		killed++
		_, statErr := os.Stat(target)
		require.True(t, os.IsNotExist(statErr), "run %d, killed: a file is at the target path", i)
		// What a kill leaves is a temporary file, the only one: each run
		// removes those of the runs before it. It passes no check, unless
		// the kill fell in the last instant between the final write and
		// the rename: then it is the whole certificate, byte for byte.
		left := leftovers(t, target)
		require.LessOrEqual(t, len(left), 1, "run %d: the temporary files of earlier runs are still there", i)
		for _, p := range left {
			r := runBinary(t, bin, nil, "check", p)
			if r.code == exitOK {
				b, err := os.ReadFile(p)
				require.NoError(t, err)
				require.True(t, bytes.Equal(whole, b), "the leftover %s passes a check but is not the certificate", p)
				continue
			}
			require.Regexp(t, "not a descent certificate|file ends inside the preamble", r.stdout, "the leftover %s", p)
		}
	}
	require.NotZero(t, killed, "every run finished before its kill: the test killed nothing")
}

func TestKilledEmitIsCleanedUpByTheNextRun(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	target := filepath.Join(dir, "sieve.dcert")
	// -workers 1 keeps the run long enough to be seen at work.
	first := start(t, bin, "emit", "sieve", "-k", "38", "-workers", "1", "-o", target)
	require.True(t, first.until(t, bigLeftover(t, target)), "the run ended before it had written 1 MiB: %s", first.stderr.String())

	// While it runs, another run to the same file is refused.
	r := runBinary(t, bin, nil, "emit", "sieve", "-k", "8", "-o", target)
	require.Equal(t, exitUsage, r.code, r.stderr)
	require.Equal(t, "descent: emit sieve: another descent run is writing "+target+" now\nhint: wait for it to finish, or give another -o\n", r.stderr)
	require.Len(t, leftovers(t, target), 1, "the refused run touched the running one's file")

	require.Equal(t, -1, first.stop(t, syscall.SIGKILL))
	left := leftovers(t, target)
	require.Len(t, left, 1, "a killed run leaves its temporary file")
	fi, err := os.Stat(left[0])
	require.NoError(t, err)

	// The next run to the same file, with any arguments, removes it and
	// says so.
	r = runBinary(t, bin, nil, "emit", "sieve", "-k", "8", "-o", target)
	require.Equal(t, exitOK, r.code, r.stderr)
	require.Equal(t, fmt.Sprintf("descent: emit sieve: removed %s (%s), left by an earlier run to %s that did not finish\n", left[0], byteWords(fi.Size()), target), r.stderr)
	require.Empty(t, leftovers(t, target))
	require.Equal(t, exitOK, runBinary(t, bin, nil, "check", target).code)
}

func TestSignalsStopAnEmitAndSetTheExitStatus(t *testing.T) {
	bin := buildBinary(t)
	dir := t.TempDir()
	target := filepath.Join(dir, "sieve.dcert")
	for _, c := range []struct {
		sig    syscall.Signal
		status int
		words  string
	}{
		{syscall.SIGINT, 130, "interrupted (SIGINT)"},
		{syscall.SIGTERM, 143, "terminated (SIGTERM)"},
	} {
		p := start(t, bin, "emit", "sieve", "-k", "38", "-workers", "1", "-o", target)
		require.True(t, p.until(t, bigLeftover(t, target)), "the run ended before it had written 1 MiB")
		require.Equal(t, c.status, p.stop(t, c.sig), "%v: %s", c.sig, p.stderr.String())
		require.Equal(t, "descent: emit sieve: "+c.words+"; nothing was written to "+target+"\n", p.stderr.String())
		require.Empty(t, p.stdout.String())
		require.Empty(t, leftovers(t, target), "%v: the temporary file is left", c.sig)
		_, err := os.Stat(target)
		require.True(t, os.IsNotExist(err), "%v: a file is at the target path", c.sig)
	}
}

// rangeArgs builds the binary and a k = 16 sieve, and returns the
// arguments of a range run of 256 blocks on one worker to target.
func rangeArgs(t *testing.T) (bin, sieve, target string, args []string) {
	bin = buildBinary(t)
	dir := t.TempDir()
	sieve = filepath.Join(dir, "s.dcert")
	require.Equal(t, exitOK, runBinary(t, bin, nil, "emit", "sieve", "-k", "16", "-o", sieve).code)
	target = filepath.Join(dir, "r.dcert")
	return bin, sieve, target, []string{"emit", "range", "-sieve", sieve, "-from", "2^40", "-to", "2^40+2^26", "-block", "18", "-workers", "1", "-o", target}
}

func TestInterruptedRangeKeepsItsJournal(t *testing.T) {
	bin, sieve, target, args := rangeArgs(t)
	p := start(t, bin, args...)
	journal := target + ".partial"
	blocks := func() bool { // the journal holds two blocks
		b, err := os.ReadFile(journal)
		return err == nil && journalBlocks(b) >= 2
	}
	require.True(t, p.until(t, blocks), "the range ended before two blocks were journaled")
	require.Equal(t, 130, p.stop(t, syscall.SIGINT), p.stderr.String())
	require.Regexp(t, `^descent: emit range: interrupted \(SIGINT\); nothing was written to \S+r\.dcert\nhint: \S+r\.dcert\.partial keeps the \d+ completed blocks: the same command resumes from them\n$`, p.stderr.String())
	require.Empty(t, leftovers(t, target))

	// A run with other arguments is refused, and told whose journal it is.
	other := append(append([]string{}, args[:8]...), "-block", "19", "-o", target)
	r := runBinary(t, bin, nil, other...)
	require.Equal(t, exitUsage, r.code, r.stderr)
	require.Regexp(t, `^descent: emit range: \S+r\.dcert\.partial holds \d+ completed blocks of an interrupted run with other parameters \(map 3n\+1, from 1099511627776 to 1099578736640, blocks of 2\^18, cap 100000, ceiling 2\^\d+, 0 predecessor rules, sieve root [0-9a-f]{64}\)\nhint: run that command again to resume it, or remove \S+r\.dcert\.partial \(or give another -o\) to start this one\n$`, r.stderr)

	// The same arguments resume.
	r = runBinary(t, bin, nil, args...)
	require.Equal(t, exitOK, r.code, r.stderr)
	require.Regexp(t, `^descent: emit range: resuming after \d+ completed blocks from \S+r\.dcert\.partial\n$`, r.stderr)
	require.Equal(t, exitOK, runBinary(t, bin, nil, "check", "-sieve", sieve, target).code)
	_, err := os.Stat(journal)
	require.True(t, os.IsNotExist(err), "the journal is left after the certificate was written")
}

// journalBlocks counts the whole block records of a journal's bytes
// (emit/journal.go: magic, digest, words, then length-prefixed records).
func journalBlocks(b []byte) int {
	pos := 16 + 32
	if len(b) < pos+4 {
		return 0
	}
	pos += 4 + int(binary.BigEndian.Uint32(b[pos:]))
	n := 0
	for pos+4 <= len(b) {
		l := int(binary.BigEndian.Uint32(b[pos:]))
		if pos+4+l > len(b) {
			break
		}
		pos += 4 + l
		n++
	}
	return n
}

func TestKilledRangeLeavesAJournalThatIsNoCertificate(t *testing.T) {
	bin, sieve, target, args := rangeArgs(t)
	p := start(t, bin, args...)
	require.True(t, p.until(t, func() bool {
		b, err := os.ReadFile(target + ".partial")
		return err == nil && journalBlocks(b) >= 1
	}), "the range ended before a block was journaled")
	require.Equal(t, -1, p.stop(t, syscall.SIGKILL))
	_, err := os.Stat(target)
	require.True(t, os.IsNotExist(err), "a file is at the target path")
	r := runBinary(t, bin, nil, "check", "-sieve", sieve, target+".partial")
	require.Equal(t, exitUsage, r.code, "the journal: %s", r.stdout)
	require.Contains(t, r.stdout, "not a descent certificate")
	// The next run removes the killed one's temporary file and resumes
	// from the journal.
	require.Len(t, leftovers(t, target), 1)
	r = runBinary(t, bin, nil, args...)
	require.Equal(t, exitOK, r.code, r.stderr)
	require.Contains(t, r.stderr, "left by an earlier run to "+target+" that did not finish")
	require.Contains(t, r.stderr, "resuming after")
	require.Empty(t, leftovers(t, target))
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
		require.Equal(t, exitOK, runBinary(t, bin, []string{"GOMAXPROCS=" + procs}, "emit", "sieve", "-k", "24", "-replace", "-o", s).code)
		require.Equal(t, exitOK, runBinary(t, bin, []string{"GOMAXPROCS=" + procs}, "emit", "range", "-sieve", s, "-from", "2^50", "-to", "2^50+2^26", "-replace", "-o", r).code)
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
