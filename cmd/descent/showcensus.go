package main

import (
	"errors"
	"fmt"
	"io"
	"math/big"
	"os"
	"text/tabwriter"

	"descent/cert"
)

// readCensus reads a census certificate's header, checks its stored tree
// and every block against its leaf, and collects the undecided numbers the
// blocks list. It re-derives nothing.
func readCensus(path string) (*cert.CensusHeader, cert.Hash, []*big.Int, error) {
	file, err := os.Open(path)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	defer file.Close()
	rd, err := cert.NewReader(file)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	h, err := cert.ParseCensusHeader(rd.Header)
	if err != nil {
		return nil, cert.Hash{}, nil, err
	}
	if err := rd.CheckTree(); err != nil {
		return nil, cert.Hash{}, nil, err
	}
	undecided := []*big.Int{}
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
		b, err := cert.ParseCensusBlock(rec, rd.Offs[i])
		if err == nil {
			err = h.CheckCensusBlockSpan(b, i, rd.Offs[i])
		}
		if err != nil {
			return nil, cert.Hash{}, nil, err
		}
		undecided = append(undecided, b.UndecidedNs...)
	}
	return h, rd.Root(), undecided, nil
}

func (c *cli) showCensus(path string, asJSON bool) int {
	h, root, undecided, err := readCensus(path)
	if err != nil {
		c.errorf("show: %s: %v", path, err)
		if errors.Is(err, cert.ErrHashMismatch) {
			c.hintf("the file is damaged or was altered")
			return exitInvalid
		}
		return exitUsage
	}
	f := censusFactsFromHeader(h, undecided)
	if asJSON {
		return c.writeJSON(f.json(path, root.String(), ModeUnchecked,
			"nothing: the claim as written, whose stored tree agrees with its header and blocks"))
	}
	w := c.stdout
	fmt.Fprintf(w, "%s: descent census certificate\n\n", path)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "  root\t%v\n", root)
	fmt.Fprintf(tw, "  map\t%s\n", f.mapText())
	fmt.Fprintf(tw, "  range\t%s, %s\n", f.rangeText(), count(f.numbers(), "number", "numbers"))
	fmt.Fprintf(tw, "  blocks\t%s of 2^%d numbers\n", count(h.Blocks, "block", "blocks"), f.E)
	fmt.Fprintf(tw, "  step cap\t%s of T\n", count(f.Cap, "step", "steps"))
	fmt.Fprintf(tw, "  ceiling\t2^%d\n", f.Ceiling)
	tw.Flush()
	fmt.Fprintf(w, "\nClaim\n%s\n", wrap(f.sentence(), 76, "  "))
	fmt.Fprintf(w, "\nWhat it does not prove\n%s\n", wrap(f.caveat(), 76, "  "))
	fmt.Fprintf(w, "\nSteps\n%s\n", wrap(fmt.Sprintf("The delay counts the steps of the standard map, %s and n/2 one step each; the steps of T "+
		"count (%s)/2 as one, and are the delay minus the height, the odd steps.", f.oddStep(), f.Map), 76, "  "))
	for _, cy := range f.Cycles {
		c.printCensusCycle(f, cy)
	}
	fmt.Fprintf(w, "\nUndecided numbers\n")
	if len(f.UndecidedNs) == 0 {
		fmt.Fprintf(w, "  none\n")
	}
	for i, n := range f.UndecidedNs {
		if i == 50 {
			fmt.Fprintf(w, "  ... and %d more ('descent show -json' lists them all)\n", len(f.UndecidedNs)-50)
			break
		}
		fmt.Fprintf(w, "  %s\n", n)
	}
	fmt.Fprintf(w, "\n%s\n", f.rederived(path))
	return exitOK
}

// printCensusCycle prints the tables and records of one cycle section.
func (c *cli) printCensusCycle(f censusFacts, cy censusCycle) {
	w := c.stdout
	n := cy.count()
	fmt.Fprintf(w, "\nThe %s that %s %s\n", count(n, "number", "numbers"), agree(n, "reaches", "reach"), f.reachText(cy.Min))
	byDelay, bySteps, byHeight := cy.marginals()
	first := map[uint64]string{}
	for _, x := range cy.First {
		first[x.Delay] = x.N
	}
	fmt.Fprintf(w, "\n  By delay (standard steps), with the first n of each\n")
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  delay\tnumbers\tfirst n\t\n")
	for _, d := range byDelay {
		fmt.Fprintf(tw, "  %d\t%d\t%s\t\n", d.Value, d.Count, first[d.Value])
	}
	tw.Flush()
	c.printCounts("By steps of T (delay - height)", "steps of T", bySteps)
	c.printCounts("By height (odd steps)", "height", byHeight)
	fmt.Fprintf(w, "  ('descent show -json' gives the table of every pair of delay and height: delay_height_counts)\n")
	fmt.Fprintf(w, "\n  Delay records: each n whose delay is larger than that of every smaller n of the range\n  that reaches %s\n", f.reachText(cy.Min))
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  n\tdelay\t\n")
	for _, r := range cy.DelayRecords {
		fmt.Fprintf(tw, "  %s\t%d\t\n", r.N, r.Delay)
	}
	tw.Flush()
	fmt.Fprintf(w, "\n  Path records: each n whose peak (the largest value of its standard trajectory) is larger\n  than that of every smaller n of the range that reaches %s\n", f.reachText(cy.Min))
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  n\tpeak\t\n")
	for _, r := range cy.PathRecords {
		fmt.Fprintf(tw, "  %s\t%s\t\n", r.N, r.Peak)
	}
	tw.Flush()
}

// printCounts prints a table of counts under a title.
func (c *cli) printCounts(title, column string, counts []censusCount) {
	fmt.Fprintf(c.stdout, "\n  %s\n", title)
	tw := tabwriter.NewWriter(c.stdout, 0, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "  %s\tnumbers\t\n", column)
	for _, d := range counts {
		fmt.Fprintf(tw, "  %d\t%d\t\n", d.Value, d.Count)
	}
	tw.Flush()
}
