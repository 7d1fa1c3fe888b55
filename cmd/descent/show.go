package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math/big"
	"os"
	"strings"
	"text/tabwriter"

	"descent/cert"
	"descent/check"
)

// showReport is the -json form of show. It states the claim as written in
// the header; Verified is always false, since show re-derives nothing.
type showReport struct {
	File       string                  `json:"file"`
	Kind       string                  `json:"kind"`
	Root       string                  `json:"root"`
	Verified   bool                    `json:"verified"`
	Map        string                  `json:"map"`
	K          int                     `json:"k"`
	J          int                     `json:"j"`
	Cap        uint32                  `json:"cap"`
	Chunks     int                     `json:"chunks"`
	Survivors  check.Num               `json:"survivors"`
	Joined     check.Num               `json:"joined,omitempty"`
	Before     check.Num               `json:"sieve_survivors,omitempty"`
	ClosedAt   map[string]check.Num    `json:"closed_at"`
	Exceptions []check.ExceptionReport `json:"exceptions"`
	Claim      string                  `json:"claim"`
	NotProven  string                  `json:"not_proven"`
}

func (c *cli) show(args []string) int {
	fs := c.flags("show", "show [-json] FILE")
	asJSON := fs.Bool("json", false, "write the claim as JSON")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	if fs.NArg() != 1 {
		c.errorf("show: want exactly one certificate")
		fs.Usage()
		return exitUsage
	}
	path := fs.Arg(0)
	switch kind, err := peekKind(path); {
	case err == nil && kind == cert.KindRange:
		return c.showRange(path, *asJSON)
	case err == nil && kind == cert.KindShard:
		return c.showShard(path, *asJSON)
	}
	h, root, err := readHeader(path)
	if err != nil {
		c.errorf("show: %s: %v", path, err)
		if errors.Is(err, cert.ErrHashMismatch) {
			fmt.Fprintf(c.stderr, "hint: the file is damaged or was altered; 'descent check %s' says where\n", path)
			return exitInvalid
		}
		return exitUsage
	}
	f := factsFromHeader(h)
	if *asJSON {
		rep := showReport{File: path, Kind: "sieve", Root: root.String(), Map: f.Map, K: f.K, J: f.J, Cap: f.Cap,
			Chunks: h.Chunks, Survivors: check.Num(fmt.Sprint(f.Survivors)), ClosedAt: map[string]check.Num{},
			Exceptions: []check.ExceptionReport{}, Claim: f.sentence(), NotProven: f.caveat()}
		if f.Joins { // survivors: the classes still to search
			rep.Survivors, rep.Joined, rep.Before = check.Num(fmt.Sprint(f.Survivors-f.Joined)), check.Num(fmt.Sprint(f.Joined)), rep.Survivors
		}
		for _, cl := range f.Closing {
			rep.ClosedAt[fmt.Sprint(cl.Step)] = check.Num(fmt.Sprint(cl.Classes))
		}
		for _, e := range f.Exceptions {
			rep.Exceptions = append(rep.Exceptions, check.ExceptionReport{N: check.Num(e.N), Fate: e.Fate, Steps: e.Steps, CycleMin: check.Num(e.CycleMin)})
		}
		b, _ := json.MarshalIndent(rep, "", "  ")
		fmt.Fprintf(c.stdout, "%s\n", b)
		return exitOK
	}
	c.printShow(path, h, root, f)
	return exitOK
}

// readHeader reads the header and the stored tree, and checks that the
// tree is consistent with the header; it reads no chunk.
func readHeader(path string) (*cert.SieveHeader, cert.Hash, error) {
	file, err := os.Open(path)
	if err != nil {
		return nil, cert.Hash{}, err
	}
	defer file.Close()
	rd, err := cert.NewReader(file)
	if err != nil {
		return nil, cert.Hash{}, err
	}
	h, err := cert.ParseSieveHeader(rd.Header)
	if err != nil {
		return nil, cert.Hash{}, err
	}
	if err := rd.CheckTree(); err != nil {
		return nil, cert.Hash{}, err
	}
	return h, rd.Root(), nil
}

func wrap(s string, width int, indent string) string {
	var b strings.Builder
	line := 0
	for i, w := range strings.Fields(s) {
		if i > 0 && line+1+len(w) > width {
			b.WriteString("\n" + indent)
			line = 0
		} else if i > 0 {
			b.WriteString(" ")
			line++
		}
		b.WriteString(w)
		line += len(w)
	}
	return indent + b.String()
}

func (c *cli) printShow(path string, h *cert.SieveHeader, root cert.Hash, f facts) {
	w := c.stdout
	if f.Joins {
		fmt.Fprintf(w, "%s: descent sieve certificate with joins\n\n", path)
	} else {
		fmt.Fprintf(w, "%s: descent sieve certificate\n\n", path)
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "  root\t%v\n", root)
	fmt.Fprintf(tw, "  map\t%s\n", f.mapText())
	fmt.Fprintf(tw, "  modulus\t2^%d (k = %d); classes may close at steps 1..%d (j = %d)\n", f.K, f.K, f.J, f.J)
	fmt.Fprintf(tw, "  survivors\t%d of the 2^%d residues\n", f.Survivors, f.K)
	if f.Joins {
		fmt.Fprintf(tw, "  joined\t%d of the survivors join a smaller residue; %d remain to search\n", f.Joined, f.Survivors-f.Joined)
	}
	fmt.Fprintf(tw, "  chunks\t%d: the top of the trie (depths 0..%d) and one per class open at depth %d\n", h.Chunks, cert.SplitDepth(f.J), cert.SplitDepth(f.J))
	fmt.Fprintf(tw, "  fate cap\t%d steps\n", f.Cap)
	tw.Flush()

	fmt.Fprintf(w, "\nClaim\n%s\n", wrap(f.sentence(), 76, "  "))
	fmt.Fprintf(w, "\nWhat it does not prove\n%s\n", wrap(f.caveat(), 76, "  "))

	fmt.Fprintf(w, "\nClasses closing at each step\n")
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  step t\tclasses mod 2^t\tresidues mod 2^%d\t\n", f.K)
	for _, cl := range f.Closing {
		fmt.Fprintf(tw, "  %d\t%d\t%d\t\n", cl.Step, cl.Classes, cl.Classes<<(f.K-cl.Step))
	}
	fmt.Fprintf(tw, "  survivors\t%d\t%d\t\n", f.Survivors>>(f.K-f.J), f.Survivors)
	tw.Flush()

	fmt.Fprintf(w, "\nExceptions: members at or below their class's threshold, decided by direct iteration\n")
	if len(f.Exceptions) == 0 {
		fmt.Fprintf(w, "  none\n")
	}
	for _, e := range f.Exceptions {
		fmt.Fprintf(w, "  n = %s %s\n", e.N, e.fateText(f.Cap, f.Ceiling))
	}
	fmt.Fprintf(w, "\nThis is the claim as written in the file; 'descent check %s' re-derives it.\n", path)
}

// peekKind reads the kind byte of a certificate.
func peekKind(path string) (byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	var pre [cert.PreambleSize]byte
	if _, err := io.ReadFull(f, pre[:]); err != nil {
		return 0, err
	}
	return pre[9], nil
}

// readRange reads a range certificate's header, checks its stored tree,
// and collects the undecided numbers from its blocks.
func readRange(path string) (*cert.RangeHeader, cert.Hash, []*big.Int, error) {
	file, err := os.Open(path)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	defer file.Close()
	rd, err := cert.NewReader(file)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	h, err := cert.ParseRangeHeader(rd.Header)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	if err := rd.CheckTree(); err != nil {
		return nil, cert.Hash{}, nil, err
	}
	var undecided []*big.Int
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, cert.Hash{}, nil, err
		}
		if cert.LeafHash(rec) != rd.Levels[0][i+1] {
			return nil, cert.Hash{}, nil, fmt.Errorf("block %d does not match its hash: %w", i, cert.ErrHashMismatch)
		}
		b, err := cert.ParseBlock(rec, rd.Offs[i], len(h.Rules))
		if err != nil {
			return nil, cert.Hash{}, nil, err
		}
		undecided = append(undecided, b.UndecidedNs...)
	}
	return h, rd.Root(), undecided, nil
}

type showRangeReport struct {
	File            string               `json:"file"`
	Kind            string               `json:"kind"`
	Root            string               `json:"root"`
	Verified        bool                 `json:"verified"`
	SieveRoot       string               `json:"sieve_root"`
	Map             string               `json:"map"`
	From            check.Num            `json:"from"`
	To              check.Num            `json:"to"`
	K               int                  `json:"k"`
	BlockExp        int                  `json:"block_exponent"`
	Cap             uint32               `json:"cap"`
	Blocks          int                  `json:"blocks"`
	Counts          check.RangeCounts    `json:"counts"`
	Records         []check.RecordReport `json:"records"`
	MaxStoppingTime *check.RecordReport  `json:"max_stopping_time"`
	Cycles          []check.CycleReport  `json:"cycles"`
	Undecided       []check.Num          `json:"undecided"`
	Claim           string               `json:"claim"`
	NotProven       string               `json:"not_proven"`
}

func (c *cli) showRange(path string, asJSON bool) int {
	h, root, undecided, err := readRange(path)
	if err != nil {
		c.errorf("show: %s: %v", path, err)
		if errors.Is(err, cert.ErrHashMismatch) {
			fmt.Fprintf(c.stderr, "hint: the file is damaged or was altered; 'descent check -sieve SIEVE %s' says where\n", path)
			return exitInvalid
		}
		return exitUsage
	}
	f := rangeFactsFromHeader(h)
	und := []check.Num{}
	for _, n := range undecided {
		und = append(und, num(n))
	}
	if asJSON {
		rep := showRangeReport{File: path, Kind: "range", Root: root.String(), SieveRoot: f.SieveRoot, Map: f.Map,
			From: check.Num(f.Lo), To: check.Num(f.Hi), K: f.K, BlockExp: f.E, Cap: f.Cap, Blocks: h.Blocks, Counts: f.Counts,
			Records: orEmpty(f.Records), MaxStoppingTime: f.Max, Cycles: orEmpty(f.Cycles), Undecided: und,
			Claim: f.sentence(), NotProven: f.caveat()}
		b, _ := json.MarshalIndent(rep, "", "  ")
		fmt.Fprintf(c.stdout, "%s\n", b)
		return exitOK
	}
	w := c.stdout
	fmt.Fprintf(w, "%s: descent range certificate\n\n", path)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "  root\t%v\n", root)
	fmt.Fprintf(tw, "  map\tT(n) = n/2 for even n, (%s)/2 for odd n\n", f.Map)
	fmt.Fprintf(tw, "  range\t[%s, %s)\n", f.Lo, f.Hi)
	fmt.Fprintf(tw, "  sieve\t%s (k = %d)\n", f.SieveRoot, f.K)
	fmt.Fprintf(tw, "  blocks\t%d of 2^%d numbers\n", h.Blocks, f.E)
	fmt.Fprintf(tw, "  step cap\t%d\n", f.Cap)
	fmt.Fprintf(tw, "  ceiling\t2^%d (an orbit that reaches it before dropping is undecided)\n", h.Ceiling)
	tw.Flush()
	fmt.Fprintf(w, "\nClaim\n%s\n", wrap(f.sentence(), 76, "  "))
	fmt.Fprintf(w, "\nWhat it does not prove\n%s\n", wrap(f.caveat(), 76, "  "))
	fmt.Fprintf(w, "\nHow the numbers are justified\n")
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	for _, row := range [][2]string{
		{"in a closing class of the sieve (stopping time = its closing step)", string(f.Counts.Sieve)},
		{"in a survivor class joined to a smaller one (meet a smaller number after k steps)", string(f.Counts.Join)},
		{"in a survivor class, searched until they drop", string(f.Counts.Search)},
		{"small numbers, iterated directly", string(f.Counts.Small)},
		{"reach a cycle without dropping", string(f.Counts.Cycle)},
		{"undecided within the cap", string(f.Counts.Undecided)},
	} {
		fmt.Fprintf(tw, "  %s\t  %s\n", row[1], row[0])
	}
	for _, r := range f.Counts.Rules {
		fmt.Fprintf(tw, "  %s\t  of the form %s, with the smaller predecessor %s (%s)\n", r.Numbers, r.Class, r.Predecessor, plural(r.Steps, "step", "steps"))
	}
	tw.Flush()
	if f.Max != nil {
		fmt.Fprintf(w, "\nLargest stopping time: %d steps, first at n = %s\n", f.Max.StoppingTime, f.Max.N)
	}
	if len(f.Counts.Rules) > 0 {
		fmt.Fprintf(w, "\nStopping-time records, among the numbers not justified by a predecessor rule (those have no stopping time here)\n")
	} else {
		fmt.Fprintf(w, "\nStopping-time records (n whose stopping time exceeds that of every smaller n in the range)\n")
	}
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  n\tstopping time\t\n")
	for _, r := range f.Records {
		fmt.Fprintf(tw, "  %s\t%d\t\n", r.N, r.StoppingTime)
	}
	tw.Flush()
	fmt.Fprintf(w, "\nCycles reached without dropping\n")
	if len(f.Cycles) == 0 {
		fmt.Fprintf(w, "  none\n")
	}
	for _, cy := range f.Cycles {
		fmt.Fprintf(w, "  the cycle whose smallest member is %s: %s numbers\n", cy.Min, cy.Count)
	}
	fmt.Fprintf(w, "\nUndecided numbers\n")
	if len(und) == 0 {
		fmt.Fprintf(w, "  none\n")
	}
	for i, n := range und {
		if i == 50 {
			fmt.Fprintf(w, "  ... and %d more ('descent show -json' lists them all)\n", len(und)-50)
			break
		}
		fmt.Fprintf(w, "  %s\n", n)
	}
	fmt.Fprintf(w, "\nThis is the claim as written in the file; 'descent check -sieve SIEVE %s' re-derives it.\n", path)
	return exitOK
}

func orEmpty[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}

// showShard says what a shard is and which certificate it is part of.
func (c *cli) showShard(path string, asJSON bool) int {
	file, err := os.Open(path)
	if err != nil {
		c.errorf("show: %v", err)
		return exitUsage
	}
	defer file.Close()
	rd, err := cert.NewReader(file)
	var h *cert.ShardHeader
	if err == nil {
		h, err = cert.ParseShardHeader(rd.Header)
	}
	if err == nil {
		err = rd.CheckTree()
	}
	if err != nil {
		c.errorf("show: %s: %v", path, err)
		if errors.Is(err, cert.ErrHashMismatch) {
			return exitInvalid
		}
		return exitUsage
	}
	kind := "sieve"
	summary := ""
	if h.Whole == cert.KindRange {
		kind = "range"
		if rh, err := cert.ParseRangeHeader(h.WholeHeader); err == nil {
			summary = fmt.Sprintf("%s over [%v, %v), blocks of 2^%d, sieve %v", rh.Map, rh.Lo, rh.Hi, rh.E, rh.SieveRoot)
		}
	} else if sh, err := cert.ParseSieveHeader(h.WholeHeader); err == nil {
		summary = factsFromHeader(sh).summary()
	}
	if asJSON {
		b, _ := json.MarshalIndent(map[string]any{"file": path, "kind": kind + " shard", "shard_root": rd.Root().String(),
			"index": h.Index, "of": h.Of, "first": h.First, "count": h.Count, "whole": summary, "verified": false}, "", "  ")
		fmt.Fprintf(c.stdout, "%s\n", b)
		return exitOK
	}
	fmt.Fprintf(c.stdout, "%s: shard %d of %d of a %s certificate\n\n", path, h.Index, h.Of, kind)
	fmt.Fprintf(c.stdout, "  shard root  %v (this file; the whole's root exists once the shards are merged)\n", rd.Root())
	fmt.Fprintf(c.stdout, "  records     %d to %d of the whole\n", h.First, h.First+h.Count-1)
	fmt.Fprintf(c.stdout, "  the whole   %s\n\n", summary)
	fmt.Fprintf(c.stdout, "A shard proves only the claims of its own records. 'descent merge' puts the shards\ntogether; 'descent check %s' re-derives this one alone.\n", path)
	return exitOK
}
