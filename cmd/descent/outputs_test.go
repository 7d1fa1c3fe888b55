package main

import (
	"bytes"
	"context"
	"go/ast"
	"go/parser"
	"go/token"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"
)

// writer is a command that writes a file, with what it reads.
type writer struct {
	name   string
	args   func(out string) []string
	inputs []string // the files it reads, which the hazards may name
}

// writers returns every command that writes a file, reading the files in
// dir: TestEveryWriterRefusesEveryHazard runs each against each hazard.
func writers(t *testing.T, dir string) []writer {
	sieve := filepath.Join(dir, "s.dcert")
	shard0, shard1 := filepath.Join(dir, "h0.dcert"), filepath.Join(dir, "h1.dcert")
	for _, a := range [][]string{
		{"emit", "sieve", "-k", "10", "-o", sieve},
		{"emit", "sieve", "-k", "10", "-shard", "0/2", "-o", shard0},
		{"emit", "sieve", "-k", "10", "-shard", "1/2", "-o", shard1},
	} {
		code, _, stderr := runCLI(a...)
		require.Equal(t, exitOK, code, stderr)
	}
	return []writer{
		{"emit sieve", func(out string) []string { return []string{"emit", "sieve", "-k", "10", "-o", out} }, nil},
		{"emit range", func(out string) []string {
			return []string{"emit", "range", "-sieve", sieve, "-to", "2^14", "-o", out}
		}, []string{sieve}},
		{"merge", func(out string) []string { return []string{"merge", "-o", out, shard0, shard1} }, []string{shard0, shard1}},
	}
}

// snapshot is what a folder holds: names, kinds and bytes of regular files.
func snapshot(t *testing.T, dir string) map[string]string {
	got := map[string]string{}
	require.NoError(t, filepath.WalkDir(dir, func(p string, d os.DirEntry, err error) error {
		require.NoError(t, err)
		fi, err := os.Lstat(p)
		require.NoError(t, err)
		got[p] = fi.Mode().Type().String()
		if fi.Mode().IsRegular() {
			b, err := os.ReadFile(p)
			require.NoError(t, err)
			got[p] += string(b)
		}
		return nil
	}))
	return got
}

func TestEveryWriterRefusesEveryHazard(t *testing.T) {
	dir := t.TempDir()
	ws := writers(t, dir)
	mk := func(name string, make func(p string) error) string {
		p := filepath.Join(dir, name)
		require.NoError(t, make(p))
		return p
	}
	folder := mk("folder", func(p string) error { return os.Mkdir(p, 0o755) })
	pipe := mk("pipe", func(p string) error { return syscall.Mkfifo(p, 0o644) })
	existing := mk("existing.dcert", func(p string) error { return os.WriteFile(p, []byte("an earlier result"), 0o644) })
	link := mk("link.dcert", func(p string) error { return os.Symlink(existing, p) })
	type hazard struct {
		name, out, reason string
		replace           bool // refused even with -replace
	}
	hazards := []hazard{
		{"a folder", folder, "-o " + folder + " is a folder", true},
		{"a named pipe", pipe, "-o " + pipe + " is a named pipe, not a regular file", true},
		{"a symbolic link", link, "-o " + link + " is a symbolic link", true},
		{"an existing file", existing, "-o " + existing + " exists", false},
		{"a missing folder", filepath.Join(dir, "missing", "x.dcert"), "cannot write into the folder", true},
	}
	// A device node, where this process may make one (root, outside a
	// restricted container): /dev/null's numbers, in the test's folder.
	dev := filepath.Join(dir, "null")
	if syscall.Mknod(dev, syscall.S_IFCHR|0o666, 1<<8|3) == nil {
		hazards = append(hazards, hazard{"a device", dev, "-o " + dev + " is a device, not a regular file", true})
	} else {
		t.Log("cannot make a device node here; the device case is not tried")
	}
	for _, w := range ws {
		for i, in := range w.inputs {
			hard := filepath.Join(dir, w.name[:1]+"-hard"+string(rune('0'+i)))
			require.NoError(t, os.Link(in, hard))
			hazards = append(hazards,
				hazard{w.name + "'s input", in, "which this command reads", true},
				hazard{w.name + "'s input through another folder", filepath.Join(folder, "..", filepath.Base(in)), "which this command reads", true},
				hazard{w.name + "'s input by a hard link", hard, "which this command reads", true})
		}
	}
	before := snapshot(t, dir)
	for _, w := range ws {
		for _, h := range hazards {
			for _, replace := range []bool{false, true} {
				if replace && !h.replace {
					continue
				}
				if strings.Contains(h.name, "input") && !strings.HasPrefix(h.name, w.name) {
					// Another command's input is, for this one, an existing
					// file, which -replace would rightly replace.
					if replace {
						continue
					}
					h.reason = "exists"
				}
				args := w.args(h.out)
				if replace {
					args = append(args, "-replace")
				}
				code, stdout, stderr := runCLI(args...)
				require.Equal(t, exitUsage, code, "%s -o %s: %s", w.name, h.name, stderr)
				require.Empty(t, stdout, "%s -o %s", w.name, h.name)
				require.True(t, strings.HasPrefix(stderr, "descent: "+w.name+": -o "), "%s -o %s: %s", w.name, h.name, stderr)
				require.Contains(t, stderr, h.reason, "%s -o %s", w.name, h.name)
				after := snapshot(t, dir)
				for p, was := range before {
					require.True(t, after[p] == was, "%s -o %s (-replace %v) changed %s", w.name, h.name, replace, p)
				}
				for p := range after {
					_, ok := before[p]
					require.True(t, ok, "%s -o %s (-replace %v) left %s", w.name, h.name, replace, p)
				}
			}
		}
	}

	// -replace replaces an existing regular file that is no input.
	for _, w := range ws {
		code, _, stderr := runCLI(append(w.args(existing), "-replace")...)
		require.Equal(t, exitOK, code, "%s -replace: %s", w.name, stderr)
		b, err := os.ReadFile(existing)
		require.NoError(t, err)
		require.True(t, bytes.HasPrefix(b, []byte("descent\x00")), "%s -replace wrote no certificate", w.name)
		require.NoError(t, os.WriteFile(existing, []byte("an earlier result"), 0o644))
	}
}

func TestRefusedBeforeAnyWork(t *testing.T) {
	// The output is checked before anything else: with a folder as -o,
	// the error is about -o even where the work itself would fail (a
	// sieve too large to compute, inputs that do not exist).
	dir := t.TempDir()
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "64", "-o", dir},
		{"emit", "range", "-sieve", filepath.Join(dir, "missing.dcert"), "-to", "2^20", "-o", dir},
		{"merge", "-o", dir, filepath.Join(dir, "missing-0.dcert")},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitUsage, code, "%v", args)
		require.Contains(t, stderr, "-o "+dir+" is a folder", "%v", args)
	}
}

// TestOnlyOutputGoWritesFiles keeps every file the command writes going
// through createOutput: no other file of the command creates, renames or
// removes a file.
func TestOnlyOutputGoWritesFiles(t *testing.T) {
	writes := map[string]bool{"Create": true, "CreateTemp": true, "OpenFile": true, "WriteFile": true, "Rename": true,
		"Link": true, "Symlink": true, "Remove": true, "RemoveAll": true, "Truncate": true, "Mkdir": true, "MkdirAll": true, "Chmod": true}
	files, err := filepath.Glob("*.go")
	require.NoError(t, err)
	fset := token.NewFileSet()
	var found []string
	for _, name := range files {
		if strings.HasSuffix(name, "_test.go") || name == "output.go" {
			continue
		}
		f, err := parser.ParseFile(fset, name, nil, 0)
		require.NoError(t, err)
		ast.Inspect(f, func(n ast.Node) bool {
			if sel, ok := n.(*ast.SelectorExpr); ok {
				if pkg, ok := sel.X.(*ast.Ident); ok && pkg.Name == "os" && writes[sel.Sel.Name] {
					found = append(found, fset.Position(sel.Pos()).String()+": os."+sel.Sel.Name)
				}
			}
			return true
		})
	}
	require.Empty(t, found, "files are written outside output.go")
}

// TestUsageListsEveryFlag compares, for each command, the flags it defines
// (as its -h lists them) with the flags of its lines in the top-level
// usage, and those lines with the package doc and the README's Usage.
func TestUsageListsEveryFlag(t *testing.T) {
	flagRE := regexp.MustCompile(`(?:^|[\s\[])-([a-z]+)`)
	defRE := regexp.MustCompile(`(?m)^  -([a-z]+)`)
	for _, cmd := range []string{"emit sieve", "emit range", "emit census", "merge", "check", "show"} {
		code, stdout, stderr := runCLI(append(strings.Fields(cmd), "-h")...)
		require.Equal(t, exitOK, code, cmd)
		require.Empty(t, stderr, cmd)
		require.Equal(t, 1, strings.Count(stdout, "usage: "), "%s -h prints its usage once", cmd)
		var defined, listed []string
		for _, m := range defRE.FindAllStringSubmatch(stdout, -1) {
			defined = append(defined, m[1])
		}
		lines := synopsis(cmd)
		require.NotEmpty(t, lines, cmd)
		seen := map[string]bool{}
		for _, l := range lines {
			for _, m := range flagRE.FindAllStringSubmatch(l, -1) {
				if !seen[m[1]] {
					seen[m[1]] = true
					listed = append(listed, m[1])
				}
			}
		}
		sort.Strings(defined)
		sort.Strings(listed)
		require.Equal(t, defined, listed, "%s: the flags it defines and those the usage lists", cmd)
	}

	var want []string
	for _, l := range strings.Split(usage, "\n") {
		if strings.HasPrefix(l, "  descent ") {
			want = append(want, strings.TrimSpace(l))
		}
	}
	src, err := os.ReadFile("main.go")
	require.NoError(t, err)
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	require.NoError(t, err)
	section := string(readme)
	if i := strings.Index(section, "\n## Usage\n"); i >= 0 {
		section = section[i+1:]
		if j := strings.Index(section[3:], "\n## "); j >= 0 {
			section = section[:j+3]
		}
	}
	for name, text := range map[string]string{"the package doc": string(src), "the README's Usage": section} {
		var got []string
		for _, l := range strings.Split(text, "\n") {
			if strings.HasPrefix(l, "//\tdescent ") || strings.HasPrefix(l, "    descent ") {
				got = append(got, strings.TrimSpace(strings.TrimPrefix(l, "//")))
			}
		}
		require.Equal(t, want, got, "%s lists the commands as the usage does", name)
	}
}

func TestCheckAndShowStopOnASignal(t *testing.T) {
	// check and show write nothing: a signal ends them at once, with the
	// signal's exit status. (The process tests send real signals to emit.)
	for _, c := range []struct {
		sig    os.Signal
		status int
		words  string
	}{{os.Interrupt, 130, "interrupted (SIGINT)"}, {syscall.SIGTERM, 143, "terminated (SIGTERM)"}} {
		ctx, cancel := context.WithCancelCause(context.Background())
		cancel(interrupted{c.sig})
		for _, cmd := range []string{"check", "show"} {
			var out, errb bytes.Buffer
			cl := &cli{stdout: &out, stderr: &errb}
			block := make(chan struct{})
			defer close(block)
			code := cl.untilStopped(ctx, cmd, func() int { <-block; return exitOK })
			require.Equal(t, c.status, code, cmd)
			require.Equal(t, "descent: "+cmd+": "+c.words+"\n", errb.String())
		}
	}
}
