package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"

	"github.com/rogpeppe/go-internal/testscript"
	"github.com/stretchr/testify/require"
)

func TestMain(m *testing.M) {
	testscript.Main(removeBinaries{m}, map[string]func(){"descent": main})
}

// removeBinaries runs the tests, then removes the binaries built for them.
type removeBinaries struct{ m *testing.M }

func (r removeBinaries) Run() int {
	code := r.m.Run()
	if built.dir != "" {
		os.RemoveAll(built.dir)
	}
	return code
}

// TestScripts runs the scripts in testdata/script, which assert the
// stdout, stderr and exit status of whole commands.
func TestScripts(t *testing.T) {
	testscript.Run(t, testscript.Params{
		Dir: "testdata/script",
		Cmds: map[string]func(ts *testscript.TestScript, neg bool, args []string){
			// flipbit FILE OFFSET BIT: flip one bit of a file.
			"flipbit": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) != 3 {
					ts.Fatalf("usage: flipbit FILE OFFSET BIT")
				}
				b := []byte(ts.ReadFile(args[0]))
				off, err1 := strconv.Atoi(args[1])
				bit, err2 := strconv.Atoi(args[2])
				if err1 != nil || err2 != nil || off >= len(b) {
					ts.Fatalf("flipbit: bad offset or bit")
				}
				b[off] ^= 1 << bit
				ts.Check(os.WriteFile(ts.MkAbs(args[0]), b, 0o644))
			},
			// truncate FILE N: keep the first N bytes.
			"truncate": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) != 2 {
					ts.Fatalf("usage: truncate FILE N")
				}
				n, err := strconv.Atoi(args[1])
				ts.Check(err)
				ts.Check(os.Truncate(ts.MkAbs(args[0]), int64(n)))
			},
			// exits N PROGRAM ARGS...: run a program, as exec does, and
			// require its exit status to be N.
			"exits": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) < 2 || neg {
					ts.Fatalf("usage: exits N PROGRAM [ARGS...]")
				}
				want, err := strconv.Atoi(args[0])
				ts.Check(err)
				got := 0
				var exit *exec.ExitError
				if err := ts.Exec(args[1], args[2:]...); errors.As(err, &exit) {
					got = exit.ExitCode()
				} else {
					ts.Check(err)
				}
				if got != want {
					ts.Fatalf("%s exited with status %d, want %d", args[1], got, want)
				}
			},
			// mkfifo NAME: make a named pipe.
			"mkfifo": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) != 1 {
					ts.Fatalf("usage: mkfifo NAME")
				}
				ts.Check(syscall.Mkfifo(ts.MkAbs(args[0]), 0o644))
			},
			// link OLD NEW: make a hard link.
			"link": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) != 2 {
					ts.Fatalf("usage: link OLD NEW")
				}
				ts.Check(os.Link(ts.MkAbs(args[0]), ts.MkAbs(args[1])))
			},
			// replace OLD NEW FILE: replace the first OLD in a file by NEW.
			"replace": func(ts *testscript.TestScript, neg bool, args []string) {
				if len(args) != 3 {
					ts.Fatalf("usage: replace OLD NEW FILE")
				}
				b := ts.ReadFile(args[2])
				if !strings.Contains(b, args[0]) {
					ts.Fatalf("%s has no %q", args[2], args[0])
				}
				ts.Check(os.WriteFile(ts.MkAbs(args[2]), []byte(strings.Replace(b, args[0], args[1], 1)), 0o644))
			},
			// size FILE N: the file has N bytes.
			"size": func(ts *testscript.TestScript, neg bool, args []string) {
				fi, err := os.Stat(ts.MkAbs(args[0]))
				ts.Check(err)
				if got := fmt.Sprint(fi.Size()); (got == args[1]) == neg {
					ts.Fatalf("%s has %s bytes", args[0], got)
				}
			},
		},
	})
}

func runCLI(args ...string) (code int, stdout, stderr string) {
	var out, errb bytes.Buffer
	c := &cli{stdout: &out, stderr: &errb}
	code = c.run(context.Background(), args)
	return code, out.String(), errb.String()
}

func TestExitStatus(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.dcert")
	code, _, stderr := runCLI("emit", "sieve", "-k", "10", "-o", good)
	require.Equal(t, exitOK, code, stderr)
	b, err := os.ReadFile(good)
	require.NoError(t, err)
	flipped := filepath.Join(dir, "flipped.dcert")
	b[len(b)-1] ^= 1
	require.NoError(t, os.WriteFile(flipped, b, 0o644))
	text := filepath.Join(dir, "notes.txt")
	require.NoError(t, os.WriteFile(text, []byte("not a certificate"), 0o644))

	for _, c := range []struct {
		args []string
		want int
	}{
		{[]string{"check", good}, exitOK},
		{[]string{"check", flipped}, exitInvalid},
		{[]string{"check", text}, exitUsage},
		{[]string{"check", filepath.Join(dir, "missing")}, exitUsage},
		{[]string{"check", good, flipped}, exitInvalid},
		{[]string{"check", flipped, text}, exitUsage},
		{[]string{"check"}, exitUsage},
		{[]string{"show", good}, exitOK},
		{[]string{"show", text}, exitUsage},
		{[]string{"emit", "sieve", "-k", "0", "-o", filepath.Join(dir, "x")}, exitUsage},
		{[]string{"help"}, exitOK},
		{[]string{"check", "-h"}, exitOK},
		{nil, exitUsage},
	} {
		code, _, _ := runCLI(c.args...)
		require.Equal(t, c.want, code, "%v", c.args)
	}
}
