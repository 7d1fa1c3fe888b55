package main

import (
	"os"
	"path/filepath"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"
)

// atomicFile is written under a temporary name beside its target and
// renamed onto the target only once the work succeeded, so a failed or
// interrupted run never leaves a file at the target path. The first bytes
// (a certificate's magic) are held back until the rest is on disk, so that
// a temporary file left by a kill is no certificate at all.
type atomicFile struct {
	*os.File
	target string
	head   []byte // the bytes held back from offset 0
}

const heldBack = 8

// WriteAt writes p at off, keeping back what falls in the first bytes.
func (f *atomicFile) WriteAt(p []byte, off int64) (int, error) {
	if off < heldBack {
		n := min(int64(len(p)), heldBack-off)
		if need := int(off + n); len(f.head) < need {
			f.head = append(f.head, make([]byte, need-len(f.head))...)
		}
		copy(f.head[off:], p[:n])
		if _, err := f.File.WriteAt(make([]byte, n), off); err != nil {
			return 0, err
		}
		if rest, err := f.File.WriteAt(p[n:], off+n); err != nil {
			return int(n) + rest, err
		}
		return len(p), nil
	}
	return f.File.WriteAt(p, off)
}

func createAtomic(target string) (*atomicFile, error) {
	dir, base := filepath.Split(target)
	if dir == "" {
		dir = "."
	}
	f, err := os.CreateTemp(dir, "."+base+".partial-*")
	if err != nil {
		return nil, err
	}
	return &atomicFile{File: f, target: target}, nil
}

// commit makes the file durable, then writes the bytes held back, and
// moves it onto the target.
func (f *atomicFile) commit() error {
	if err := f.Sync(); err != nil {
		f.abort()
		return err
	}
	if _, err := f.File.WriteAt(f.head, 0); err != nil {
		f.abort()
		return err
	}
	if err := f.Sync(); err != nil {
		f.abort()
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(f.Name())
		return err
	}
	if err := os.Chmod(f.Name(), 0o644); err != nil {
		os.Remove(f.Name())
		return err
	}
	if err := os.Rename(f.Name(), f.target); err != nil {
		os.Remove(f.Name())
		return err
	}
	return nil
}

// abort removes the temporary file.
func (f *atomicFile) abort() {
	f.Close()
	os.Remove(f.Name())
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
