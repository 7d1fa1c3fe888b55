package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"strings"

	"descent/check"
)

func (c *cli) check(args []string) int {
	fs := c.flags("check", "check [-json] [-root HEX] [-sieve FILE] [-sample N [-seed S]] [-budget STEPS] FILE...")
	asJSON := fs.Bool("json", false, "write one JSON report per certificate, one per line")
	rootHex := fs.String("root", "", "the published root `HEX` the certificate must have")
	workers := fs.Int("workers", 0, "parallel workers (default: all cores)")
	sieve := fs.String("sieve", "", "for a range certificate: the sieve certificate `FILE` it rests on")
	sampleN := fs.Int("sample", 0, "for a range certificate: re-derive only `N` blocks, chosen from the root and -seed")
	seed := fs.String("seed", "", "the reader's own `seed` for choosing the sampled blocks")
	shardFlag := fs.String("shard", "", "re-derive only share `i/N` of the records (or auto, auto/N, from the scheduler)")
	part := fs.String("part", "", "check only record `P`, or share i/N, against -root through the Merkle audit path")
	budgetFlag := fs.String("budget", "", "the most work to allow, in `steps` of T (like 2^40; default 2^48): a certificate whose work bound exceeds it is reported beyond limits before that work")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	if fs.NArg() == 0 {
		c.errorf("check: no certificate given")
		fs.Usage()
		return exitUsage
	}
	if !c.workersOK("check", *workers) {
		return exitUsage
	}
	if *sampleN < 0 {
		c.errorf("check: -sample %d: want a positive number of blocks", *sampleN)
		return exitUsage
	}
	o := check.Options{Workers: *workers, Sieve: *sieve, Sample: *sampleN, Seed: *seed}
	if *budgetFlag != "" {
		b, err := parseNumber(*budgetFlag)
		if err != nil || b.Sign() <= 0 || !b.IsUint64() {
			c.errorf("check: -budget %q: want a positive number of steps below 2^64, like 2^40", *budgetFlag)
			return exitUsage
		}
		o.Budget = b.Uint64()
	}
	if *shardFlag != "" {
		sh, err := parseShard(*shardFlag, os.Getenv)
		if err != nil {
			c.errorf("check: %v", err)
			return exitUsage
		}
		o.Span = &check.Span{I: sh.I, N: sh.N}
	}
	if *part != "" && (*rootHex == "" || fs.NArg() != 1) {
		c.errorf("check: -part needs -root HEX, the published root, and one certificate")
		return exitUsage
	}
	if *rootHex != "" {
		root, err := check.ParseRoot(*rootHex)
		if err != nil {
			c.errorf("check: -root: %v", err)
			return exitUsage
		}
		o.Root = &root
	}
	status := exitOK
	for _, path := range fs.Args() {
		var rep *check.Report
		update, finish := c.progress("records")
		o.Progress = nil
		if update != nil {
			o.Progress = func(done, total int) { update(done, total, "") }
		}
		if *part != "" {
			rep = check.Part(path, *part, *o.Root, o)
		} else {
			rep = check.File(path, o)
		}
		finish()
		status = max(status, exitStatus(rep))
		if *asJSON {
			b, err := json.Marshal(rep)
			if err != nil {
				c.errorf("check: %s: %v", path, err)
				return exitUsage
			}
			fmt.Fprintf(c.stdout, "%s\n", b)
			continue
		}
		c.printReport(rep)
	}
	return status
}

func exitStatus(rep *check.Report) int {
	switch err := rep.Err(); {
	case err == nil:
		return exitOK
	case errors.Is(err, check.ErrInvalid):
		return exitInvalid
	}
	return exitUsage
}

func (c *cli) printReport(rep *check.Report) {
	if rep.Valid && (rep.Span != nil || rep.Shard != nil) {
		what := fmt.Sprintf("%s certificate", rep.Kind)
		if s := rep.Shard; s != nil {
			what = fmt.Sprintf("shard %d of %d (records %d to %d) of a %s certificate", s.Index, s.Of, s.First, s.First+s.Count-1, strings.TrimSuffix(rep.Kind, " shard"))
		}
		part := ""
		if s := rep.Span; s != nil {
			part = fmt.Sprintf("; re-derived records %d to %d only", s.First, s.First+s.Count-1)
			if rep.BytesRead > 0 {
				part += fmt.Sprintf(" (read %d bytes of the file)", rep.BytesRead)
			}
		}
		fmt.Fprintf(c.stdout, "%s: valid %s%s\n  root       %s\n", rep.File, what, part, rep.Root)
		note := "the claims of these records are re-derived, and the header's counts and exceptions (from the map alone); the other records' claims are not"
		if rep.Joined != "" {
			note = "the claims of these records, their joins included, are re-derived, and the header's counts and exceptions (from the map alone) except the count of joins, which needs every record; the other records' claims are not"
		}
		if strings.HasPrefix(rep.Kind, "range") {
			note = "the claims of these blocks are re-derived; the other blocks, and the totals, need their own checks"
		}
		fmt.Fprintf(c.stdout, "  note       %s\n", note)
		return
	}
	if rep.Valid && rep.Kind == "range" {
		verdict := "valid range certificate"
		if a := rep.Audit; a != nil {
			verdict = fmt.Sprintf("passes an audit of %d of its %d blocks (not a full check)", a.Audited, a.Blocks)
		}
		fmt.Fprintf(c.stdout, "%s: %s\n  root       %s\n  sieve      %s\n  claim      %s\n",
			rep.File, verdict, rep.Root, rep.SieveRoot, rangeFactsFromReport(rep).summary())
		if a := rep.Audit; a != nil {
			fmt.Fprintf(c.stdout, "  seed       %s (repeat this audit with -seed %s)\n", a.Seed, a.Seed)
			for _, p := range a.PassIfWrong {
				fmt.Fprintf(c.stdout, "  audit      if %d of the %d blocks (%.3g%%) were wrong, this audit would pass with probability %.3g\n",
					p.WrongBlocks, a.Blocks, 100*float64(p.WrongBlocks)/float64(a.Blocks), p.Pass)
			}
		}
		return
	}
	if rep.Valid {
		fmt.Fprintf(c.stdout, "%s: valid %s certificate\n  root       %s\n  claim      %s\n",
			rep.File, rep.Kind, rep.Root, factsFromReport(rep).summary())
		return
	}
	if errors.Is(rep.Err(), check.ErrUsage) {
		// The reader's own mistake, not a fault of the certificate.
		c.errorf("%s: %v", rep.File, rep.Err())
		if rep.Hint != "" {
			fmt.Fprintf(c.stderr, "hint: %s\n", rep.Hint)
		}
		return
	}
	verdict := "INVALID"
	switch err := rep.Err(); {
	case errors.Is(err, check.ErrLimits):
		verdict = "BEYOND THIS CHECKER'S LIMITS, neither valid nor invalid"
	case errors.Is(err, check.ErrMalformed):
		verdict = "MALFORMED"
	}
	fmt.Fprintf(c.stdout, "%s: %s (%s): %v\n", rep.File, verdict, rep.Reason, rep.Err())

	if w := rep.Where; w != nil && (w.Expected != "" || w.Found != "") {
		fmt.Fprintf(c.stdout, "  claim      %s\n  expected   %s\n  found      %s\n", w.Claim, w.Expected, w.Found)
	}
}
