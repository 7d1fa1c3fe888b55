// Package report writes the page of `descent report`: one self-contained
// HTML file of sections, each with its facts, claim, caution, figures and
// the tables behind them. It owns the page's data model and its rendering
// and knows nothing of certificates, of their bytes or of checking them:
// the command fills a Page from the checker's reports, in its own words,
// and this package only lays them out.
//
// The page fetches nothing. Plots are inline SVG drawn by
// gonum.org/v1/plot; the one font they use is embedded once in the page;
// there is no script, no image and no style sheet outside the file, so it
// reads the same offline, in an archive, and on paper.
package report

import (
	"errors"
	"fmt"
	"math"
)

// Page is the whole report.
type Page struct {
	Title    string
	Intro    []string // paragraphs at the top, before the sections
	Sections []Section
}

// Status is what the checker established about a section's certificate.
// The page labels each section with it, so an audit is never mistaken for
// a full check.
type Status int

const (
	// Checked: every claim was re-derived.
	Checked Status = iota + 1
	// Audited: the certificate passed an audit of sampled parts, not a
	// full check.
	Audited
	// Partial: only a share of the claims was re-derived (a shard).
	Partial
	// Failed: the check failed; the section shows why, and no plots.
	Failed
)

func (s Status) String() string {
	switch s {
	case Checked:
		return "checked"
	case Audited:
		return "audit passed, not a full check"
	case Partial:
		return "partly checked"
	case Failed:
		return "failed"
	}
	return "unknown"
}

// claimHeading heads the claim, so that an audited claim is never read
// as a fully checked one.
func (s Status) claimHeading() string {
	switch s {
	case Checked:
		return "Claim, re-derived in full by the checker"
	case Audited:
		return "Claim, audited: only the sampled parts were re-derived"
	}
	return "Claim"
}

// class is the CSS class of a status.
func (s Status) class() string {
	switch s {
	case Checked:
		return "checked"
	case Audited:
		return "audited"
	case Partial:
		return "partial"
	}
	return "failed"
}

// Section is one certificate. Kind is a free word ("sieve", "range", later
// "census"): the layout is the same for every kind, so a new kind needs
// new figures, not a change here.
type Section struct {
	Title   string // usually the file name
	Kind    string
	Status  Status
	Verdict string // one line: what the check found
	Root    string // the root; for a failed section, as stored
	Facts   []Fact // label and value rows under the root
	Claim   string // the claim, fit to quote
	Caution string // what the claim does not prove
	Failure *Failure
	Notes   []string // paragraphs after the claim: what the figures rest on
	Figures []Figure
}

// Fact is one labelled value.
type Fact struct{ Label, Value string }

// Failure is why a check failed.
type Failure struct {
	Reason  string // the checker's reason code
	Message string
	Where   []Fact
}

// Figure is a plot with the table of the numbers it is drawn from, or a
// table alone. The table carries the exact values; the plot only pictures
// them, so nothing is only in a picture.
type Figure struct {
	ID      string // short and stable within a section: an anchor and a handle for tests
	Title   string
	Caption string // what is plotted, in which units and step convention, and what is left out
	Plot    *Plot  // nil: the table alone
	Table   Table
}

// PlotKind is how a plot draws its series.
type PlotKind int

const (
	Lines  PlotKind = iota + 1 // points joined by lines, each point marked
	Points                     // marks only
	Bars                       // one bar per point, from the bottom of the Y axis
)

// Plot is a chart of one or more series.
type Plot struct {
	Kind   PlotKind
	X, Y   Axis
	Series []Series
}

// Axis is one axis of a plot. The label names the quantity, its unit and
// its step convention.
type Axis struct {
	Label string
	Log   bool // logarithmic; every value on it must be positive
	// Categories makes the axis nominal: a point with X = i stands at
	// Categories[i].
	Categories []string
}

// Series is a named list of points; Name is shown in a legend when a plot
// has more than one series.
type Series struct {
	Name   string
	Points []XY
}

// XY is a point. Values are for drawing; exact values go in the table.
type XY struct{ X, Y float64 }

// Table is rows of exact values, as text.
type Table struct {
	Columns []string
	Rows    [][]string
}

// ErrModel is wrapped by the errors of a page that cannot be drawn as
// stated: a mistake of the caller, not of the input.
var ErrModel = errors.New("report: bad page model")

func modelErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrModel}, args...)...)
}

// validate checks what the page promises: a failed section has no
// figures, every plot has its table, values on a log axis are positive,
// nominal points name a category, and rows are as wide as the header.
func (p *Page) validate() error {
	for i, s := range p.Sections {
		if s.Status < Checked || s.Status > Failed {
			return modelErr("section %d (%s): no status", i, s.Title)
		}
		if s.Status == Failed && len(s.Figures) > 0 {
			return modelErr("section %d (%s): a failed check has no figures", i, s.Title)
		}
		seen := map[string]bool{}
		for _, f := range s.Figures {
			if f.ID == "" || seen[f.ID] {
				return modelErr("section %d (%s): figure id %q empty or repeated", i, s.Title, f.ID)
			}
			seen[f.ID] = true
			if err := f.validate(); err != nil {
				return modelErr("section %d (%s), figure %s: %v", i, s.Title, f.ID, err)
			}
		}
	}
	return nil
}

func (f *Figure) validate() error {
	for r, row := range f.Table.Rows {
		if len(row) != len(f.Table.Columns) {
			return fmt.Errorf("row %d has %d cells for %d columns", r, len(row), len(f.Table.Columns))
		}
	}
	p := f.Plot
	if p == nil {
		return nil
	}
	if len(f.Table.Rows) == 0 {
		return errors.New("a plot without the table of its numbers")
	}
	if p.Kind < Lines || p.Kind > Bars {
		return errors.New("no plot kind")
	}
	if len(p.Series) == 0 {
		return errors.New("a plot without series")
	}
	for _, s := range p.Series {
		for _, pt := range s.Points {
			if err := p.X.check(pt.X); err != nil {
				return fmt.Errorf("series %q, x = %v: %v", s.Name, pt.X, err)
			}
			if err := p.Y.check(pt.Y); err != nil {
				return fmt.Errorf("series %q, y = %v: %v", s.Name, pt.Y, err)
			}
		}
	}
	return nil
}

func (a Axis) check(v float64) error {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return errors.New("not a finite number")
	case a.Log && v <= 0:
		return errors.New("not positive, on a log axis")
	case a.Categories != nil && (v != math.Trunc(v) || v < 0 || int(v) >= len(a.Categories)):
		return errors.New("names no category")
	}
	return nil
}
