package main

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"descent/check"
	"descent/check/kernel"
)

func (c *cli) check(args []string) int {
	fs := c.flags("check")
	asJSON := fs.Bool("json", false, "write one JSON report per certificate, one per line")
	rootHex := fs.String("root", "", "the published root `HEX` the certificate must have")
	workers := fs.Int("workers", 0, "`N` parallel workers (default 0: all cores)")
	sieve := fs.String("sieve", "", "for a range certificate: the sieve certificate `FILE` it rests on")
	sampleN := fs.Int("sample", 0, "for a range certificate: re-derive only `N` blocks, chosen from the root and -seed")
	seed := fs.String("seed", "", "the reader's own seed `S` for choosing the sampled blocks (needs -sample)")
	shardFlag := fs.String("shard", "", "re-derive only share `i/N` of the records (or auto, auto/N, from the scheduler)")
	part := fs.String("part", "", "check only record `P`, or share i/N, against -root through the Merkle audit path")
	receiptOut := fs.String("receipt", "", "write a signed receipt of the check to `OUT` (one certificate; needs -sign)")
	signKey := fs.String("sign", "", "sign the receipt with the secret key `NAME.key` ('descent key new')")
	reference := fs.Bool("reference", false, "check with the trusted kernel alone, without the fast paths: slower, the same verdict")
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
	rc, code, stop := c.receiptSetup(*receiptOut, *signKey, fs.Args())
	if stop {
		return code
	}
	if !c.checkFlagsOK(fs) {
		return exitUsage
	}
	if *seed != "" {
		// A seed the writer knows lets it grind a certificate whose wrong
		// blocks the draw misses (SPEC.md, "Audits").
		c.errorf("warning: -seed %q: an audit proves something only if the seed was chosen after the root was published, by someone the writer could not predict; without -seed the checker draws one at random", *seed)
	}
	o := check.Options{Workers: *workers, Options: kernel.Options{Draw: check.Sample(*sampleN, *seed)}}
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
		o.Span = &kernel.Span{I: sh.I, N: sh.N}
	}
	if *part != "" && (*rootHex == "" || fs.NArg() != 1) {
		c.errorf("check: -part needs -root HEX, the published root, and one certificate")
		return exitUsage
	}
	if *rootHex != "" {
		root, err := parseRoot(*rootHex)
		if err != nil {
			c.errorf("check: -root: %v", err)
			return exitUsage
		}
		o.Root = &root
	}
	if !c.checkKindsOK(fs) {
		return exitUsage
	}
	status := exitOK
	chk := newChecker(o, *sieve, *reference)
	for _, path := range fs.Args() {
		if c.censusNotCheckable(path) {
			status = max(status, exitUsage)
			continue
		}
		var rep *Report
		update, finish := c.progress("records")
		chk.o.Progress = nil
		if update != nil {
			chk.o.Progress = func(done, total int) { update(done, total, "") }
		}
		if *part != "" {
			rep = chk.part(path, *part, *o.Root)
		} else {
			rep = chk.file(path)
		}
		finish()
		status = max(status, exitStatus(rep))
		words(rep)
		if rc != nil {
			status = max(status, rc.write(c, rep, *part))
		}
		if *asJSON {
			if code := c.writeJSON(rep); code != exitOK {
				return code
			}
			continue
		}
		c.printReport(rep)
	}
	return status
}

func exitStatus(rep *Report) int {
	switch err := rep.Err(); {
	case err == nil:
		return exitOK
	case errors.Is(err, kernel.ErrInvalid):
		return exitInvalid
	}
	return exitUsage
}

// words fills in the claim of a valid report in words, and the standard
// steps of its stated stopping times.
func words(rep *Report) {
	if !rep.Valid {
		return
	}
	switch {
	case rep.Kind == "range":
		addStandardSteps(rep)
		f := rangeFactsFromReport(rep)
		rep.Claim, rep.NotProven = f.sentence(), f.caveat()
		if rep.Mode != ModeFull {
			rep.Claim = "As written, and re-derived only as far as \"checked\" says: " + rep.Claim
		}
	case rep.Kind == "sieve" || rep.Kind == "sieve shard":
		// A sieve's counts and exceptions are re-derived in every mode, from
		// the map alone where the chunks are not all read; only the count
		// of joins needs every chunk.
		f := factsFromReport(rep)
		rep.Claim, rep.NotProven = f.sentence(), f.caveat()
		if joinsUnconfirmed(rep) {
			rep.Claim += " " + joinsAsWritten
		}
	}
}

// joinsAsWritten qualifies the count of joins of a check that did not read
// every chunk of the whole.
const joinsAsWritten = "(The count of joins is as written: a check of part of the chunks cannot confirm it.)"

func joinsUnconfirmed(rep *Report) bool {
	return rep.Joined != "" && (rep.Mode != ModeFull || rep.Shard != nil)
}

// verdict is the first line of a report on a valid certificate: what was
// checked, never more.
func verdict(rep *Report) string {
	whole := rep.Kind + " certificate"
	if s := rep.Shard; s != nil {
		whole = fmt.Sprintf("shard %d of %d (%s) of a %s certificate", s.Index, s.Of, spanText(rep, s), strings.TrimSuffix(rep.Kind, " shard"))
	}
	switch rep.Mode {
	case ModeAudit:
		return fmt.Sprintf("passes an audit of %d of %d %s, not a full check of this %s", rep.Audit.Audited, rep.Audit.Blocks, unitWord(rep, rep.Audit.Blocks), whole)
	case ModeShare:
		if rep.ShareIsAll() {
			return fmt.Sprintf("valid as far as checked: %s (share %d of %d: all of them) re-derived, as 'checked' says, of this %s", spanText(rep, rep.Span), rep.Span.Index, rep.Span.Of, whole)
		}
		return fmt.Sprintf("valid as far as checked: %s (share %d of %d) re-derived, not a full check of this %s", spanText(rep, rep.Span), rep.Span.Index, rep.Span.Of, whole)
	case ModePart:
		return fmt.Sprintf("valid as far as checked: %s, against the given root, not a full check of this %s", spanText(rep, rep.Span), whole)
	}
	return "valid " + whole
}

func unitWord(rep *Report, n int) string {
	if strings.HasPrefix(rep.Kind, "range") {
		return agree(n, "block", "blocks")
	}
	return agree(n, "chunk", "chunks")
}

func spanText(rep *Report, s *SpanReport) string {
	if s.Count == 1 {
		return fmt.Sprintf("%s %d", unitWord(rep, 1), s.First)
	}
	return fmt.Sprintf("%s %d to %d", unitWord(rep, 2), s.First, s.First+s.Count-1)
}

func (c *cli) printReport(rep *Report) {
	w := c.stdout
	if rep.Valid {
		fmt.Fprintf(w, "%s: %s\n  root       %s\n", rep.File, verdict(rep), rep.Root)
		rng := strings.HasPrefix(rep.Kind, "range")
		if rng {
			fmt.Fprintf(w, "  sieve      %s\n", rep.SieveRoot)
		}
		fmt.Fprintf(w, "  checked    %s\n", rep.Checked())
		if a := rep.Audit; a != nil {
			who := "drawn at random by the checker"
			if a.SeedFrom == "reader" {
				who = "given with -seed: it proves something only if the writer could not know it"
			}
			fmt.Fprintf(w, "  seed       %s (%s; repeat this audit with -seed %s)\n", a.Seed, who, a.Seed)
			for _, p := range a.PassIfWrong {
				fmt.Fprintf(w, "  audit      if %d of the %d blocks (%.3g%%) were wrong, this audit would pass with probability %.3g\n",
					p.WrongBlocks, a.Blocks, 100*float64(p.WrongBlocks)/float64(a.Blocks), p.Pass)
			}
		}
		switch {
		case rng && rep.Kind == "range":
			f := rangeFactsFromReport(rep)
			if rep.Mode == ModeFull {
				fmt.Fprintf(w, "  claim      %s\n  hence      %s\n", f.summary(), strings.TrimPrefix(f.conclusion(), "Hence, by strong induction, "))
			} else {
				fmt.Fprintf(w, "  as written %s\n", f.summary())
			}
		case rng: // a range shard: its whole's totals are not in it
		case joinsUnconfirmed(rep):
			fmt.Fprintf(w, "  claim      %s %s\n", factsFromReport(rep).summary(), joinsAsWritten)
		default:
			fmt.Fprintf(w, "  claim      %s\n", factsFromReport(rep).summary())
		}
		if rep.BytesRead > 0 {
			fmt.Fprintf(w, "  read       %d bytes of the file\n", rep.BytesRead)
		}
		return
	}
	if errors.Is(rep.Err(), kernel.ErrUsage) {
		// The reader's own mistake, not a fault of the certificate.
		c.errorf("%s: %v", rep.File, rep.Err())
		if rep.Hint != "" {
			fmt.Fprintf(c.stderr, "hint: %s\n", rep.Hint)
		}
		return
	}
	verdict := "INVALID"
	switch err := rep.Err(); {
	case errors.Is(err, kernel.ErrLimits):
		verdict = "BEYOND THIS CHECKER'S LIMITS, neither valid nor invalid"
	case errors.Is(err, kernel.ErrMalformed):
		verdict = "MALFORMED"
	}
	fmt.Fprintf(w, "%s: %s (%s): %v\n", rep.File, verdict, rep.Reason, rep.Err())
	if wh := rep.Where; wh != nil && (wh.Expected != "" || wh.Found != "") {
		if wh.Claim != "" { // a root that differs is no claim of the file
			fmt.Fprintf(w, "  claim      %s\n", wh.Claim)
		}
		fmt.Fprintf(w, "  expected   %s\n  found      %s\n", wh.Expected, wh.Found)
	}
}
