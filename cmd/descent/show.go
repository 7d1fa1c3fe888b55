package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math/big"
	"os"
	"strings"
	"text/tabwriter"

	"descent/cert"
)

func (c *cli) show(args []string) int {
	fs := c.flags("show")
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
	case err == nil && kind == cert.KindCensus:
		return c.showCensus(path, *asJSON)
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
	rep := sieveReport(h, root, h.Chunks)
	rep.File = path
	f := factsFromReport(rep)
	if *asJSON {
		rep.Claim, rep.NotProven = f.sentence(), f.caveat()
		return c.writeJSON(rep)
	}
	c.printShow(path, h, root, f)
	return exitOK
}

// writeJSON writes one report as one line of JSON.
func (c *cli) writeJSON(v any) int {
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetEscapeHTML(false) // the claims compare with < and >
	if err := enc.Encode(v); err != nil {
		c.errorf("%v", err)
		return exitUsage
	}
	c.stdout.Write(b.Bytes())
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
		fmt.Fprintf(tw, "  joined\t%d of the survivors %s a smaller residue; %d %s to search\n", f.Joined, agree(f.Joined, "joins", "join"),
			f.Survivors-f.Joined, agree(f.Survivors-f.Joined, "remains", "remain"))
	}
	fmt.Fprintf(tw, "  chunks\t%d: the top of the trie (depths 0..%d) and one per class open at depth %d\n", h.Chunks, cert.SplitDepth(f.J), cert.SplitDepth(f.J))
	fmt.Fprintf(tw, "  fate cap\t%s of T\n", count(f.Cap, "step", "steps"))
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
	rep := rangeReport(h, root, undecided)
	rep.File = path
	addStandardSteps(rep)
	f := rangeFactsFromReport(rep)
	if asJSON {
		rep.Claim, rep.NotProven = f.sentence(), f.caveat()
		return c.writeJSON(rep)
	}
	und := rep.Undecided
	w := c.stdout
	fmt.Fprintf(w, "%s: descent range certificate\n\n", path)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "  root\t%v\n", root)
	fmt.Fprintf(tw, "  map\t%s\n", f.mapText())
	fmt.Fprintf(tw, "  range\t%s\n", f.rangeText())
	fmt.Fprintf(tw, "  sieve\t%s (k = %d)\n", f.SieveRoot, f.K)
	fmt.Fprintf(tw, "  blocks\t%s of 2^%d numbers\n", count(h.Blocks, "block", "blocks"), f.E)
	fmt.Fprintf(tw, "  step cap\t%s of T\n", count(f.Cap, "step", "steps"))
	fmt.Fprintf(tw, "  ceiling\t2^%d: an orbit that reaches it before dropping is undecided\n", f.Ceiling)
	tw.Flush()
	fmt.Fprintf(w, "\nClaim\n%s\n", wrap(f.sentence(), 76, "  "))
	fmt.Fprintf(w, "\nWhat it does not prove\n%s\n", wrap(f.caveat(), 76, "  "))
	fmt.Fprintf(w, "\nHow the numbers are justified\n")
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	for _, row := range [][2]string{
		{string(f.Counts.Sieve), "in a closing class of the sieve: stopping time = the closing step"},
		{string(f.Counts.Search), "in a survivor class, searched until " + agree(f.Counts.Search, "it drops", "they drop")},
		{string(f.Counts.Small), agree(f.Counts.Small, "small number, iterated directly until it drops", "small numbers, iterated directly until they drop")},
		{string(f.Counts.Join), "in a survivor class the sieve joins to a smaller residue: " + agree(f.Counts.Join, "meets a smaller number", "meet smaller numbers") + fmt.Sprintf(" after %d steps", f.K)},
	} {
		fmt.Fprintf(tw, "  %s\t  %s\n", row[0], row[1])
	}
	for _, r := range f.Counts.Rules {
		fmt.Fprintf(tw, "  %s\t  of the form %s in a survivor class, resting on the smaller predecessor %s (%s)\n", r.Numbers, r.Class, r.Predecessor, count(r.Steps, "step", "steps"))
	}
	fmt.Fprintf(tw, "  %s\t  %s a cycle without dropping\n", f.Counts.Cycle, agree(f.Counts.Cycle, "reaches", "reach"))
	fmt.Fprintf(tw, "  %s\t  undecided within the cap\n", f.Counts.Undecided)
	tw.Flush()

	fmt.Fprintf(w, "\nStopping times (%s)\n", stepsLabel(f.Map))
	fmt.Fprintf(w, "  stated for %s: those justified by the sieve, by search or as small ones\n", count(f.Counts.Stated(), "number", "numbers"))
	if n := f.ruleNumbers(); n.Sign() > 0 {
		fmt.Fprintf(w, "  not stated for the %s resting on predecessor rules: theirs may be larger\n", count(n.String(), "number", "numbers"))
	}
	if f.joins() {
		fmt.Fprintf(w, "  not stated for the %s resting on joins of the sieve: theirs may be larger\n", count(f.Counts.Join, "number", "numbers"))
	}
	if f.Max != nil {
		fmt.Fprintf(w, "  the largest stated: %s, first at n = %s\n", stoppingTimeText(f.Max), f.Max.N)
		fmt.Fprintf(w, "\nStopping-time records: each n with a stated stopping time larger than that of every\nsmaller n of the range with a stated stopping time\n")
		tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintf(tw, "  n\tsteps of T\tstandard steps\t\n")
		for _, r := range f.Records {
			std := "-"
			if r.StandardSteps > 0 {
				std = fmt.Sprint(r.StandardSteps)
			}
			fmt.Fprintf(tw, "  %s\t%d\t%s\t\n", r.N, r.StoppingTime, std)
		}
		tw.Flush()
	}
	fmt.Fprintf(w, "\nCycles reached without dropping\n")
	if len(f.Cycles) == 0 {
		fmt.Fprintf(w, "  none\n")
	}
	for _, cy := range f.Cycles {
		fmt.Fprintf(w, "  the cycle whose smallest member is %s: %s\n", cy.Min, count(cy.Count, "number", "numbers"))
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

// shardShow is the -json form of show for a shard file.
type shardShow struct {
	File      string `json:"file"`
	Mode      string `json:"mode"`
	Checked   string `json:"checked"`
	Kind      string `json:"kind"`
	ShardRoot string `json:"shard_root"`
	Index     int    `json:"index"`
	Of        int    `json:"of"`
	First     int    `json:"first"`
	Count     int    `json:"count"`
	Whole     string `json:"whole"`
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
	kind, unit := "sieve", "chunks"
	summary := ""
	if h.Whole == cert.KindCensus {
		kind, unit = "census", "blocks"
		if ch, err := cert.ParseCensusHeader(h.WholeHeader); err == nil {
			summary = fmt.Sprintf("%s over %s, blocks of 2^%d numbers", ch.Map, rangeText(ch.Lo.String(), ch.Hi.String()), ch.E)
		}
	} else if h.Whole == cert.KindRange {
		kind, unit = "range", "blocks"
		if rh, err := cert.ParseRangeHeader(h.WholeHeader); err == nil {
			summary = fmt.Sprintf("%s over %s, blocks of 2^%d numbers, sieve %v", rh.Map, rangeText(rh.Lo.String(), rh.Hi.String()), rh.E, rh.SieveRoot)
		}
	} else if sh, err := cert.ParseSieveHeader(h.WholeHeader); err == nil {
		summary = factsFromHeader(sh).summary()
	}
	span := fmt.Sprintf("%s %d to %d", unit, h.First, h.First+h.Count-1)
	if h.Count == 1 {
		span = fmt.Sprintf("%s %d", strings.TrimSuffix(unit, "s"), h.First)
	}
	if asJSON {
		return c.writeJSON(shardShow{File: path, Mode: ModeUnchecked, Checked: "nothing: the shard as written, whose stored tree agrees with its header",
			Kind: kind + " shard", ShardRoot: rd.Root().String(), Index: h.Index, Of: h.Of, First: h.First, Count: h.Count, Whole: summary})
	}
	fmt.Fprintf(c.stdout, "%s: shard %d of %d of a %s certificate\n\n", path, h.Index, h.Of, kind)
	fmt.Fprintf(c.stdout, "  shard root  %v (this file; the whole's root exists once the shards are merged)\n", rd.Root())
	fmt.Fprintf(c.stdout, "  records     %s of the whole\n", span)
	fmt.Fprintf(c.stdout, "  the whole   %s\n\n", summary)
	if h.Whole == cert.KindCensus && !censusCheckable {
		fmt.Fprintf(c.stdout, "A shard proves only the claims of its own records. 'descent merge' puts the shards\ntogether; this version of descent cannot check census certificates yet.\n")
		return exitOK
	}
	fmt.Fprintf(c.stdout, "A shard proves only the claims of its own records. 'descent merge' puts the shards\ntogether; 'descent check %s' re-derives this one alone.\n", path)
	return exitOK
}
