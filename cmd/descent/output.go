package main

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"descent/emit"
)

// Every command that writes a file opens it with createOutput, and only
// there (TestOnlyOutputGoWritesFiles keeps it so): it refuses, before any
// work, an output that names an input, a directory, a device or another
// file that is not a regular one, or an existing file without -replace.
//
// The certificate is written to a temporary file beside the target,
// .NAME.tmp-DIGITS, locked while the run writes it, and moved onto the
// target only once complete, so a failed or interrupted run never leaves
// a file at the target path. The first bytes (a certificate's magic) are
// held back until the rest is on disk, so that a temporary file left by a
// kill is no certificate at all. A run that is killed cannot remove its
// temporary file; the next run to the same target finds it by its name,
// sees that no process holds its lock, removes it and says so.

// output is a certificate being written.
type output struct {
	*os.File
	ctx     context.Context
	target  string
	replace bool
	perm    os.FileMode // the mode of the finished file; 0 means 0644
	head    []byte      // the bytes held back from offset 0
}

// input is a file a command reads, which its output must not be.
type input struct {
	what string // how the command line names it: "the -sieve file", "a shard"
	path string
}

const heldBack = 8

// tempPrefix is the name of target's temporary files up to their digits.
func tempPrefix(target string) string { return "." + filepath.Base(target) + ".tmp-" }

// outputProblem is a reason to refuse an output path, with a hint.
type outputProblem struct{ msg, hint string }

func (p *outputProblem) Error() string { return p.msg }

// checkOutput says what is wrong with writing to path, or nil. It follows
// no symbolic link at path itself and compares files by identity (device
// and inode), so that another name of an input (a hard or symbolic link,
// a path through another folder) is caught too.
func checkOutput(path string, replace bool, inputs []input) *outputProblem {
	if path == "" {
		return &outputProblem{"no output file; give -o FILE", ""}
	}
	dir := filepath.Dir(path)
	if fi, err := os.Stat(dir); err != nil {
		return &outputProblem{fmt.Sprintf("-o %s: cannot write into the folder %s: %v", path, dir, reason(err)), ""}
	} else if !fi.IsDir() {
		return &outputProblem{fmt.Sprintf("-o %s: %s is not a folder", path, dir), ""}
	}
	fi, err := os.Lstat(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return &outputProblem{fmt.Sprintf("-o %s: %v", path, reason(err)), ""}
	}
	mode := fi.Mode()
	switch {
	case mode&fs.ModeSymlink != 0:
		return &outputProblem{fmt.Sprintf("-o %s is a symbolic link", path),
			"descent replaces its output by renaming, which would replace the link and not the file it points to: give the file's own path or another name"}
	case mode.IsDir():
		return &outputProblem{fmt.Sprintf("-o %s is a folder", path),
			fmt.Sprintf("give the name of a file to create, such as %s", filepath.Join(path, "out.dcert"))}
	case !mode.IsRegular():
		return &outputProblem{fmt.Sprintf("-o %s is %s, not a regular file", path, fileKind(mode)),
			"descent writes certificates only to regular files"}
	}
	for _, in := range inputs {
		if ifi, err := os.Stat(in.path); err == nil && os.SameFile(fi, ifi) {
			same := ""
			if in.path != path {
				same = fmt.Sprintf(" (%s)", in.path)
			}
			return &outputProblem{fmt.Sprintf("-o %s is %s%s, which this command reads", path, in.what, same),
				"give another output name; descent never writes over its inputs"}
		}
	}
	if !replace {
		return &outputProblem{fmt.Sprintf("-o %s exists", path),
			"give -replace to replace it, or another name"}
	}
	return nil
}

func fileKind(m fs.FileMode) string {
	switch {
	case m&fs.ModeDevice != 0:
		return "a device"
	case m&fs.ModeNamedPipe != 0:
		return "a named pipe"
	case m&fs.ModeSocket != 0:
		return "a socket"
	}
	return "a special file"
}

// reason returns an error from the os package without the system call
// and the path it names, which the caller says in its own words.
func reason(err error) error {
	var pe *fs.PathError
	var le *os.LinkError
	switch {
	case errors.As(err, &pe):
		return pe.Err
	case errors.As(err, &le):
		return le.Err
	}
	return err
}

// createOutput checks -o (flag -o of command cmd) and creates its
// temporary file, after removing those of earlier runs that did not
// finish. It reports on stderr and returns false when the command must
// stop, with exit status 2.
func (c *cli) createOutput(ctx context.Context, cmd, path string, replace bool, inputs []input) (*output, bool) {
	if !c.outputOK(cmd, path, replace, inputs) {
		return nil, false
	}
	if !c.removeLeftovers(cmd, path) {
		return nil, false
	}
	for range 3 {
		f, err := os.CreateTemp(filepath.Dir(path), tempPrefix(path)+"*")
		if err != nil {
			c.errorf("%s: cannot create a file beside %s: %v", cmd, path, reason(err))
			return nil, false
		}
		// Lock it, then make sure that no other run's clean-up removed it
		// in the instant before the lock.
		_ = emit.TryLock(f)
		fi, err1 := f.Stat()
		named, err2 := os.Stat(f.Name())
		if err1 == nil && err2 == nil && os.SameFile(fi, named) {
			return &output{File: f, ctx: ctx, target: path, replace: replace}, true
		}
		f.Close()
	}
	c.errorf("%s: cannot create a file beside %s: another run keeps removing it", cmd, path)
	return nil, false
}

// outputOK reports on stderr what is wrong with writing to path; false
// means that the command must stop, with exit status 2.
func (c *cli) outputOK(cmd, path string, replace bool, inputs []input) bool {
	p := checkOutput(path, replace, inputs)
	if p == nil {
		return true
	}
	c.errorf("%s: %s", cmd, p.msg)
	if p.hint != "" {
		c.hintf("%s", p.hint)
	}
	return false
}

// removeLeftovers removes the temporary files of earlier runs to path
// that did not finish, saying so, and refuses if another run is writing
// path now.
func (c *cli) removeLeftovers(cmd, path string) bool {
	dir, prefix := filepath.Dir(path), tempPrefix(path)
	entries, err := os.ReadDir(dir)
	if err != nil {
		return true // creating the temporary file will say what is wrong
	}
	for _, e := range entries {
		name := e.Name()
		digits := strings.TrimPrefix(name, prefix)
		if digits == name || digits == "" || strings.Trim(digits, "0123456789") != "" || !e.Type().IsRegular() {
			continue
		}
		p := filepath.Join(dir, name)
		f, err := os.OpenFile(p, os.O_RDWR, 0)
		if err != nil {
			continue
		}
		size := int64(-1)
		if fi, err := f.Stat(); err == nil {
			size = fi.Size()
		}
		err = emit.TryLock(f)
		switch {
		case err == nil:
			if os.Remove(p) == nil {
				c.errorf("%s: removed %s (%s), left by an earlier run to %s that did not finish", cmd, p, byteWords(size), path)
			}
		case errors.Is(err, emit.ErrBusy):
			f.Close()
			c.errorf("%s: another descent run is writing %s now", cmd, path)
			c.hintf("wait for it to finish, or give another -o")
			return false
		default:
			c.errorf("%s: %s (%s) may be left by an earlier run to %s that did not finish; this system cannot tell", cmd, p, byteWords(size), path)
			c.hintf("remove it if no descent run is writing %s", path)
		}
		f.Close()
	}
	return true
}

func byteWords(n int64) string {
	switch {
	case n < 0:
		return "size unknown"
	case n < 1e4:
		return fmt.Sprintf("%d bytes", n)
	case n < 1e7:
		return fmt.Sprintf("%.0f kB", float64(n)/1e3)
	case n < 1e10:
		return fmt.Sprintf("%.0f MB", float64(n)/1e6)
	}
	return fmt.Sprintf("%.1f GB", float64(n)/1e9)
}

// WriteAt writes p at off, keeping back what falls in the first bytes.
// It stops the work once the run's context is canceled.
func (f *output) WriteAt(p []byte, off int64) (int, error) {
	if err := f.ctx.Err(); err != nil {
		return 0, err
	}
	if off < heldBack {
		n := min(int64(len(p)), heldBack-off)
		if need := int(off + n); len(f.head) < need {
			f.head = append(f.head, make([]byte, need-len(f.head))...)
		}
		copy(f.head[off:], p[:n])
		if _, err := f.File.WriteAt(make([]byte, n), off); err != nil {
			return 0, f.writeErr(err)
		}
		if rest, err := f.File.WriteAt(p[n:], off+n); err != nil {
			return int(n) + rest, f.writeErr(err)
		}
		return len(p), nil
	}
	n, err := f.File.WriteAt(p, off)
	if err != nil {
		err = f.writeErr(err)
	}
	return n, err
}

// writeErr names the target, not the temporary file, in a write error.
func (f *output) writeErr(err error) error {
	return fmt.Errorf("cannot write %s: %w", f.target, reason(err))
}

// commit makes the file durable, then writes the bytes held back, and
// moves it onto the target: without -replace, only if the target still
// does not exist.
func (f *output) commit() error {
	err := f.finish()
	if err != nil {
		f.abort()
		return err
	}
	dir, _ := os.Open(filepath.Dir(f.target))
	if dir != nil { // make the new name durable too
		dir.Sync()
		dir.Close()
	}
	return f.File.Close()
}

func (f *output) finish() error {
	if err := f.Sync(); err != nil {
		return f.writeErr(err)
	}
	if _, err := f.File.WriteAt(f.head, 0); err != nil {
		return f.writeErr(err)
	}
	if err := f.Sync(); err != nil {
		return f.writeErr(err)
	}
	perm := f.perm
	if perm == 0 {
		perm = 0o644
	}
	if err := f.Chmod(perm); err != nil {
		return f.writeErr(err)
	}
	// The file stays open, and so locked, until it has its name.
	if !f.replace {
		err := os.Link(f.Name(), f.target)
		if errors.Is(err, fs.ErrExist) {
			return fmt.Errorf("%s was created by something else while this run wrote it; it was left alone and nothing was written", f.target)
		}
		if err == nil {
			os.Remove(f.Name())
			return nil
		}
		// A file system without hard links: check, then rename.
		if _, err := os.Lstat(f.target); err == nil {
			return fmt.Errorf("%s was created by something else while this run wrote it; it was left alone and nothing was written", f.target)
		}
	} else if fi, err := os.Lstat(f.target); err == nil && !fi.Mode().IsRegular() {
		return fmt.Errorf("%s was replaced by %s while this run wrote it; it was left alone and nothing was written", f.target, fileKind(fi.Mode()))
	}
	if err := os.Rename(f.Name(), f.target); err != nil {
		return f.writeErr(err)
	}
	return nil
}

// writeWhole writes data, complete, to a new file at path, through the
// same checks and temporary file as a certificate, and never replaces a
// file: keys and receipts, which are small and written at once. perm is
// the file's mode (a secret key's is 0600; the temporary file is 0600
// from the start, so the key is never readable by others). It reports on
// stderr and returns false when nothing was written.
func (c *cli) writeWhole(cmd, path string, data []byte, perm os.FileMode, inputs []input) bool {
	f, ok := c.createOutput(context.Background(), cmd, path, false, inputs)
	if !ok {
		return false
	}
	f.perm = perm
	if _, err := f.WriteAt(data, 0); err != nil {
		f.abort()
		c.errorf("%s: %v", cmd, err)
		return false
	}
	if err := f.commit(); err != nil {
		c.errorf("%s: %v", cmd, err)
		return false
	}
	return true
}

// removeWritten removes a file this run wrote and must take back.
func removeWritten(path string) { os.Remove(path) }

// abort removes the temporary file.
func (f *output) abort() {
	os.Remove(f.Name())
	f.File.Close()
}

func isTerminal(f *os.File) bool { return term.IsTerminal(int(f.Fd())) }

// progress returns a callback that draws a bar on stderr when it is a
// terminal, and nil otherwise, so logs and pipes get no cursor codes.
// The callback takes the work done, the total and a description.
func (c *cli) progress(what string) (func(done, total int, desc string), func()) {
	if !c.stderrTTY {
		return nil, func() {}
	}
	var bar *progressbar.ProgressBar
	update := func(done, total int, desc string) {
		if bar == nil {
			bar = progressbar.NewOptions(total,
				progressbar.OptionSetWriter(c.stderr),
				progressbar.OptionSetDescription(what),
				progressbar.OptionShowCount(),
				progressbar.OptionSetPredictTime(true),
				progressbar.OptionClearOnFinish(),
				progressbar.OptionThrottle(100e6))
		}
		if desc != "" {
			bar.Describe(desc)
		}
		bar.Set(done)
	}
	return update, func() {
		if bar != nil {
			bar.Finish()
		}
	}
}
