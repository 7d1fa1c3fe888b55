package main

import (
	"fmt"
	"io"
	"os"

	"descent/check"
	"descent/check/kernel"
)

// checker checks certificates given by path: with package check (the
// kernel with its fast paths), or with the kernel alone (-reference).
// A range's sieve is checked once, the first time a range asks for it.
type checker struct {
	o         check.Options
	reference bool
}

// newChecker sets up checks with the options o and the sieve file at
// sievePath ("" for none) for ranges.
func newChecker(o check.Options, sievePath string, reference bool) *checker {
	c := &checker{o: o, reference: reference}
	if sievePath != "" {
		var done bool
		var for_ kernel.Hash
		var sv *kernel.Sieve
		var fl *kernel.Failure
		c.o.Sieve = func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
			if !done || named != for_ {
				sv, fl = c.rangeSieve(sievePath, named)
				done, for_ = true, named
			}
			return sv, fl
		}
	}
	return c
}

func (c *checker) rangeSieve(path string, named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
	f, size, err := openSized(path)
	if err != nil {
		return nil, &kernel.Failure{Class: kernel.ErrUsage, Reason: kernel.ReasonUnreadable, Msg: fmt.Sprintf("the sieve %s cannot be read: %v", path, err)}
	}
	defer f.Close()
	if c.reference {
		return kernel.RangeSieve(f, size, path, named, c.o.Options)
	}
	return check.RangeSieve(f, size, path, named, c.o)
}

func openSized(path string) (*os.File, int64, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, 0, err
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, 0, err
	}
	return f, st.Size(), nil
}

// file checks the certificate at path.
func (c *checker) file(path string) *Report {
	return c.run(path, kernel.ModeFull, func(r io.ReaderAt, size int64) *kernel.Result {
		if c.reference {
			return kernel.Check(r, size, c.o.Options)
		}
		return check.Check(r, size, c.o)
	})
}

// part checks part of the certificate at path against root.
func (c *checker) part(path, part string, root kernel.Hash) *Report {
	return c.run(path, kernel.ModePart, func(r io.ReaderAt, size int64) *kernel.Result {
		if c.reference {
			span, fl := check.ParsePart(part)
			if fl != nil {
				return &kernel.Result{Mode: kernel.ModePart, Failure: fl}
			}
			return kernel.Part(r, size, span, root, c.o.Options)
		}
		return check.Part(r, size, part, root, c.o)
	})
}

func (c *checker) run(path, mode string, do func(io.ReaderAt, int64) *kernel.Result) *Report {
	f, size, err := openSized(path)
	if err != nil {
		if c.o.Span != nil && mode == kernel.ModeFull {
			mode = kernel.ModeShare
		}
		v := Version()
		rep := &Report{File: path, Mode: mode, Checker: &v}
		return rep.fail(&kernel.Failure{Class: kernel.ErrUsage, Reason: kernel.ReasonUnreadable, Msg: "cannot read: " + err.Error()})
	}
	defer f.Close()
	return reportOf(do(f, size), path)
}
