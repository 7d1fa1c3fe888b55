package main

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"path/filepath"
	"slices"
	"strings"
	"text/tabwriter"

	"descent/archive"
	"descent/cert"
	"descent/check"
	"descent/check/kernel"
)

const archiveUsage = `usage:
  descent archive add [-sieve FILE] DIR FILE...
  descent archive verify [-sample N] [-reindex] DIR
  descent archive find [-json] [-map M] [-kind K] [-covers N] DIR
`

func (c *cli) archive(args []string) int {
	if len(args) == 0 {
		c.errorf("archive: want add, verify or find")
		fmt.Fprint(c.stderr, archiveUsage)
		return exitUsage
	}
	switch args[0] {
	case "add":
		return c.archiveAdd(args[1:])
	case "verify":
		return c.archiveVerify(args[1:])
	case "find":
		return c.archiveFind(args[1:])
	case "help", "-h", "-help", "--help":
		fmt.Fprint(c.stdout, archiveUsage)
		return exitOK
	}
	c.errorf("archive: unknown command %q: want add, verify or find", args[0])
	return exitUsage
}

// parseAll parses flags wherever they stand among the arguments (flags
// after DIR are natural here) and returns the other arguments. After
// "--" everything is an argument.
func (c *cli) parseAll(fs *flag.FlagSet, args []string) ([]string, int, bool) {
	var rest []string
	for {
		if code, stop := c.parse(fs, args); stop {
			return nil, code, true
		}
		used := len(args) - fs.NArg()
		if used > 0 && args[used-1] == "--" {
			return append(rest, fs.Args()...), 0, false
		}
		if fs.NArg() == 0 {
			return rest, 0, false
		}
		rest = append(rest, fs.Arg(0))
		args = fs.Args()[1:]
	}
}

// openArchive opens DIR and says what it cleaned up after a killed add.
func (c *cli) openArchive(cmd, dir string, create bool) (*archive.Store, int) {
	s, err := archive.Open(dir, archive.Options{Create: create, Check: checkForArchive, Pause: archivePause(),
		Waiting: func() { c.errorf("archive %s: %s: waiting for another descent using the archive", cmd, dir) }})
	if err != nil {
		c.errorf("archive %s: %v", cmd, err)
		if errors.Is(err, archive.ErrNotArchive) && !create {
			fmt.Fprintf(c.stderr, "hint: 'descent archive add %s FILE...' makes a new archive\n", dir)
		}
		return nil, exitUsage
	}
	if r := s.Recovered; r.Any() {
		c.errorf("archive %s: %s: cleaned up after an interrupted add: %s completed, %s undone, %s removed", cmd, dir,
			count(r.Completed, "entry", "entries"), count(r.Undone, "entry", "entries"), count(r.Temporaries, "temporary file", "temporary files"))
	}
	return s, exitOK
}

// indexHint says how to rebuild a lost index.
func (c *cli) indexHint(dir string) {
	fmt.Fprintf(c.stderr, "hint: 'descent archive verify -reindex %s' rebuilds the index from the certificates\n", dir)
}

func (c *cli) archiveAdd(args []string) int {
	fs := c.flags("archive add")
	sieve := fs.String("sieve", "", "the sieve certificate `FILE` the ranges rest on, if the archive lacks it; it is checked and stored too")
	rest, code, stop := c.parseAll(fs, args)
	if stop {
		return code
	}
	if len(rest) < 2 {
		c.errorf("archive add: want a directory and at least one certificate")
		fs.Usage()
		return exitUsage
	}
	dir, files := rest[0], rest[1:]
	if *sieve != "" {
		files = append([]string{*sieve}, files...)
	}
	s, code := c.openArchive("add", dir, true)
	if s == nil {
		return code
	}
	defer s.Close()
	added, err := s.Add(files)
	var refused *archive.RefusedError
	switch {
	case errors.As(err, &refused):
		status := exitOK
		for _, r := range refused.Refused {
			c.errorf("archive add: %s: %v", r.File, r.Err)
			var missing *archive.SieveMissingError
			switch {
			case errors.As(r.Err, &missing):
				fmt.Fprintf(c.stderr, "hint: give the sieve with -sieve FILE, or add it to the archive first\n")
				status = max(status, exitUsage)
			case errors.Is(r.Err, archive.ErrInvalid):
				status = max(status, exitInvalid)
			default:
				status = max(status, exitUsage)
			}
		}
		c.errorf("archive add: nothing stored in %s: %s of %d refused", dir, count(len(refused.Refused), "file", "files"), len(files))
		return status
	case errors.Is(err, archive.ErrIndex):
		c.errorf("archive add: %v", err)
		c.indexHint(dir)
		return exitInvalid
	case err != nil:
		c.errorf("archive add: %s: %v", dir, err)
		return exitUsage
	}
	for _, a := range added {
		what := "stored as"
		switch {
		case a.SameAs != "":
			what = "the same certificate as " + a.SameAs + ":"
		case a.Already:
			what = "already archived as"
		}
		fmt.Fprintf(c.stdout, "%s: %s %s (%s)\n", a.File, what, a.Verdict.Root, a.Verdict.Describe())
	}
	return exitOK
}

func (c *cli) archiveVerify(args []string) int {
	fs := c.flags("archive verify")
	sample := fs.Int("sample", 0, "audit `N` blocks of each range (drawn with a random seed) instead of re-deriving all of them")
	reindex := fs.Bool("reindex", false, "rebuild the index from the certificates that pass")
	rest, code, stop := c.parseAll(fs, args)
	if stop {
		return code
	}
	if len(rest) != 1 {
		c.errorf("archive verify: want one archive directory")
		fs.Usage()
		return exitUsage
	}
	if *sample < 0 {
		c.errorf("archive verify: -sample %d: want a positive number of blocks", *sample)
		return exitUsage
	}
	dir := rest[0]
	s, code := c.openArchive("verify", dir, false)
	if s == nil {
		return code
	}
	defer s.Close()
	sum, err := s.Verify(archive.VerifyOptions{Sample: *sample, Reindex: *reindex, Report: func(r archive.Result) {
		file := filepath.Join(dir, filepath.FromSlash(r.Path))
		if r.Status != archive.OK {
			c.errorf("archive verify: %s: %s: %v", file, r.Status, r.Err)
			return
		}
		how := "checked in full"
		if r.Verdict.Audit != "" {
			how = "passed an " + r.Verdict.Audit
		}
		fmt.Fprintf(c.stdout, "ok  %s  %s, %s\n", file, r.Verdict.Describe(), how)
	}})
	if err != nil {
		c.errorf("archive verify: %v", err)
		if errors.Is(err, archive.ErrIndex) {
			c.indexHint(dir)
			return exitInvalid
		}
		return exitUsage
	}
	total := 0
	for _, n := range sum.Count {
		total += n
	}
	line := fmt.Sprintf("%s: %s", dir, count(total, "entry", "entries"))
	for st, n := range sum.Count {
		if n > 0 {
			line += fmt.Sprintf(", %d %s", n, archive.Status(st))
		}
	}
	if *reindex {
		line += fmt.Sprintf("; index rebuilt with %s", count(sum.Reindexed, "entry", "entries"))
	}
	fmt.Fprintln(c.stdout, line)
	if sum.IndexErr != nil {
		c.errorf("archive verify: %v", sum.IndexErr)
	}
	if sum.Problems() == 0 {
		return exitOK
	}
	switch {
	case sum.IndexErr != nil || sum.Count[archive.Unindexed]+sum.Count[archive.Misindexed] > 0:
		c.indexHint(dir)
	default:
		fmt.Fprintf(c.stderr, "hint: restore damaged or missing files from another copy ('descent archive add %s FILE' puts a good copy in place); move stray files out of %s\n", dir, filepath.Join(dir, "objects"))
	}
	return exitInvalid
}

// findEntry is one line of 'archive find -json'.
type findEntry struct {
	Root      string `json:"root"`
	Kind      string `json:"kind"`
	Map       string `json:"map"`
	K         int    `json:"k,omitempty"`
	J         int    `json:"j,omitempty"`
	From      Num    `json:"from,omitempty"`
	To        Num    `json:"to,omitempty"`
	SieveRoot string `json:"sieve_root,omitempty"`
	Claim     string `json:"claim"`
	File      string `json:"file"`
	Size      int64  `json:"size"`
	Added     string `json:"added"`
	Checked   string `json:"checked"`
	CheckMode string `json:"check_mode"`
}

func (c *cli) archiveFind(args []string) int {
	fs := c.flags("archive find")
	asJSON := fs.Bool("json", false, "write one JSON object per certificate, one per line")
	mapFlag := fs.String("map", "", "only certificates for the `map` M (3n+1, 5n+1, ...)")
	kind := fs.String("kind", "", fmt.Sprintf("only certificates of the `kind` K (%s)", joinKinds()))
	covers := fs.String("covers", "", "only certificates over a range that contains `N` (decimal, 2^60, 5*2^60, 2^60+2^35)")
	rest, code, stop := c.parseAll(fs, args)
	if stop {
		return code
	}
	if len(rest) != 1 {
		c.errorf("archive find: want one archive directory")
		fs.Usage()
		return exitUsage
	}
	dir := rest[0]
	var q archive.Query
	if *mapFlag != "" {
		m, err := cert.ParseMap(*mapFlag)
		if err != nil {
			c.errorf("archive find: -map: %v", err)
			return exitUsage
		}
		q.Map = m.String()
	}
	if *kind != "" {
		if !slices.Contains(archive.Kinds, *kind) {
			c.errorf("archive find: -kind %q: want one of %s", *kind, joinKinds())
			return exitUsage
		}
		q.Kind = *kind
	}
	if *covers != "" {
		n, err := parseNumber(*covers)
		if err != nil {
			c.errorf("archive find: -covers: %v", err)
			return exitUsage
		}
		q.Covers = n.String()
	}
	s, code := c.openArchive("find", dir, false)
	if s == nil {
		return code
	}
	defer s.Close()
	es, err := s.Find(q)
	if err != nil {
		c.errorf("archive find: %v", err)
		if errors.Is(err, archive.ErrIndex) {
			c.indexHint(dir)
			return exitInvalid
		}
		return exitUsage
	}
	if *asJSON {
		for _, e := range es {
			b, err := json.Marshal(findEntry{Root: e.Root, Kind: e.Kind, Map: e.Map, K: e.K, J: e.J, From: Num(e.Lo), To: Num(e.Hi),
				SieveRoot: e.SieveRoot, Claim: e.Claim, File: filepath.Join(dir, filepath.FromSlash(e.Path)), Size: e.Size,
				Added: e.Added, Checked: e.Checked, CheckMode: e.CheckMode})
			if err != nil {
				c.errorf("archive find: %v", err)
				return exitUsage
			}
			fmt.Fprintf(c.stdout, "%s\n", b)
		}
		return exitOK
	}
	if len(es) == 0 {
		c.errorf("archive find: no certificate in %s matches", dir)
		return exitOK
	}
	tw := tabwriter.NewWriter(c.stdout, 0, 0, 2, ' ', 0)
	for _, e := range es {
		fmt.Fprintf(tw, "%s\t%s\t%s\n", e.Root, e.Describe(), filepath.Join(dir, filepath.FromSlash(e.Path)))
	}
	tw.Flush()
	return exitOK
}

func joinKinds() string { return strings.Join(archive.Kinds, ", ") }

// checkForArchive is the archive's CheckFunc: package check on the copy
// the archive keeps. The archive learns only the verdict, so that the
// checker's API can change without the archive changing.
func checkForArchive(s archive.Subject) (archive.Verdict, error) {
	kind, sieveRoot := peekCertificate(io.NewSectionReader(s.R, 0, s.Size))
	var o check.Options
	var sievePath string
	switch kind {
	case cert.KindShard:
		return archive.Verdict{}, fmt.Errorf("%w: a shard file; merge the shards ('descent merge') and archive the whole certificate", archive.ErrMalformed)
	case cert.KindRange:
		if sieveRoot != "" {
			path, err := s.Sieve(sieveRoot)
			if err != nil {
				return archive.Verdict{}, err
			}
			sievePath = path
		}
		o.Draw = check.Sample(s.Sample, "") // an audit is of a range's blocks
	}
	chk := newChecker(o, sievePath, false)
	rep := reportOf(check.Check(s.R, s.Size, chk.o), "")
	if err := rep.Err(); err != nil {
		class := archive.ErrMalformed
		if errors.Is(err, kernel.ErrInvalid) {
			class = archive.ErrInvalid
		}
		if rep.Reason == class.Error() {
			return archive.Verdict{}, fmt.Errorf("%w: %v", class, err)
		}
		return archive.Verdict{}, fmt.Errorf("%w (%s): %v", class, rep.Reason, err)
	}
	v := archive.Verdict{Root: rep.Root, Kind: rep.Kind, Map: rep.Map, K: rep.K}
	switch rep.Kind {
	case "sieve":
		v.J, v.Claim = rep.J, factsFromReport(rep).summary()
	case "range":
		v.Lo, v.Hi, v.SieveRoot = string(rep.From), string(rep.To), rep.SieveRoot
		v.Claim = rangeFactsFromReport(rep).summary()
	default:
		return archive.Verdict{}, fmt.Errorf("%w: a %s certificate, which the archive does not take", archive.ErrMalformed, rep.Kind)
	}
	if a := rep.Audit; a != nil {
		v.Audit = fmt.Sprintf("audit of %d of %d blocks, seed %s", a.Audited, a.Blocks, a.Seed)
	}
	return v, nil
}

// peekCertificate reads the preamble and, for a range, the header, and
// returns the kind and the root of the sieve the range rests on. It
// reports nothing on bytes it cannot read: the check that follows says
// what is wrong with them.
func peekCertificate(r io.Reader) (kind byte, sieveRoot string) {
	var pre [cert.PreambleSize]byte
	if _, err := io.ReadFull(r, pre[:]); err != nil {
		return 0, ""
	}
	kind = pre[9]
	body := binary.BigEndian.Uint32(pre[14:])
	if kind != cert.KindRange || body > cert.MaxHeaderBody {
		return kind, ""
	}
	b, err := io.ReadAll(io.LimitReader(r, int64(body)))
	if err != nil || len(b) != int(body) {
		return kind, ""
	}
	h, err := cert.ParseRangeHeader(append(pre[:], b...))
	if err != nil {
		return kind, ""
	}
	return kind, h.SieveRoot.String()
}
