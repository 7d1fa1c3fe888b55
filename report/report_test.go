package report

import (
	"bytes"
	"errors"
	"math"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// demoPage is invented data (a demo, not a result) with every kind of
// plot, a log axis on each side, a nominal axis, a legend and a failure.
func demoPage() *Page {
	tbl := Table{Columns: []string{"x", "y"}, Rows: [][]string{{"1", "2"}}}
	return &Page{
		Title: "demo <report>",
		Intro: []string{"invented numbers"},
		Sections: []Section{{
			Title: "a & b.dcert", Kind: "sieve", Status: Checked, Verdict: "valid", Root: "00ff",
			Facts: []Fact{{Label: "map", Value: "T"}}, Claim: "a claim", Caution: "a caution",
			Figures: []Figure{
				{ID: "lines", Title: "lines", Plot: &Plot{Kind: Lines, X: Axis{Label: "step t"}, Y: Axis{Label: "share", Log: true},
					Series: []Series{{Points: []XY{{1, 0.5}, {2, 0.25}, {3, 0.01}}}}}, Table: tbl},
				{ID: "bars", Title: "bars", Plot: &Plot{Kind: Bars, X: Axis{Label: "kind", Categories: []string{"a", "b", "c"}}, Y: Axis{Label: "count", Log: true},
					Series: []Series{{Points: []XY{{0, 1e6}, {2, 1}}}}}, Table: tbl},
				{ID: "points", Title: "points", Plot: &Plot{Kind: Points, X: Axis{Label: "n", Log: true}, Y: Axis{Label: "steps"},
					Series: []Series{{Name: "one", Points: []XY{{2, 1}, {27, 59}}}, {Name: "two <b>", Points: []XY{{1e30, 500}}}}}, Table: tbl},
				{ID: "table", Title: "table only", Table: tbl},
			},
		}, {
			Title: "bad.dcert", Kind: "range", Status: Failed, Verdict: "INVALID",
			Failure: &Failure{Reason: "block", Message: "block 3 differs", Where: []Fact{{Label: "expected", Value: "1"}}},
		}},
	}
}

func write(t *testing.T, p *Page) string {
	t.Helper()
	var b bytes.Buffer
	require.NoError(t, Write(&b, p))
	return b.String()
}

// The page must fetch nothing: no script, no attribute or style that
// names a resource outside the file, and every font the plots name is
// declared in the page itself.
func TestReportPageIsSelfContained(t *testing.T) {
	page := write(t, demoPage())
	require.NotContains(t, strings.ToLower(page), "<script")
	require.NotContains(t, page, "@import")
	for _, m := range regexp.MustCompile(`(?i)\b(src|href|xlink:href|action|poster|data)\s*=\s*"([^"]*)"`).FindAllStringSubmatch(page, -1) {
		v := m[2]
		require.True(t, strings.HasPrefix(v, "#") || strings.HasPrefix(v, "data:"), "%s=%q refers outside the page", m[1], v)
	}
	for _, m := range regexp.MustCompile(`url\(([^)]*)\)`).FindAllStringSubmatch(page, -1) {
		require.True(t, strings.HasPrefix(m[1], "data:"), "url(%.40s) refers outside the page", m[1])
	}
	declared := map[string]bool{}
	for _, m := range regexp.MustCompile(`@font-face\{font-family:"([^"]+)"`).FindAllStringSubmatch(page, -1) {
		declared[m[1]] = true
	}
	used := regexp.MustCompile(`font-family:([^;"]+);`).FindAllStringSubmatch(page, -1)
	require.NotEmpty(t, used, "the plots write no text")
	for _, m := range used {
		fam := strings.Trim(strings.Split(m[1], ",")[0], `" `)
		require.True(t, declared[fam], "the plots use the font %q, which the page does not embed", fam)
	}
	require.Equal(t, 3, strings.Count(page, "<svg"), "one inline SVG per plot")
	require.Equal(t, 3, strings.Count(page, "<details>"), "one collapsible table per plot")
	require.NotContains(t, page, "<?xml", "inline SVG takes no XML declaration")
}

func TestReportTextIsEscaped(t *testing.T) {
	page := write(t, demoPage())
	require.Contains(t, page, "demo &lt;report&gt;")
	require.Contains(t, page, "a &amp; b.dcert")
	require.Contains(t, page, "two &lt;b&gt;", "a legend entry is escaped by the SVG canvas")
	require.NotContains(t, page, "<report>")
}

func TestReportFailedSectionShowsReasonAndNoPlot(t *testing.T) {
	page := write(t, demoPage())
	i := strings.Index(page, `data-title="bad.dcert"`)
	require.Positive(t, i)
	require.Contains(t, page, `<section class="cert failed" id="cert-2"`)
	bad := page[i:]
	require.Contains(t, bad, "block 3 differs")
	require.NotContains(t, bad, "<svg")
	require.NotContains(t, bad, "<figure")
	require.NotContains(t, bad, "Claim")
}

// A page that cannot be drawn as stated is refused, and nothing is
// written.
func TestReportBadModelsAreRefused(t *testing.T) {
	for name, edit := range map[string]func(p *Page){
		"zero on a log axis":      func(p *Page) { p.Sections[0].Figures[0].Plot.Series[0].Points[0].Y = 0 },
		"NaN":                     func(p *Page) { p.Sections[0].Figures[2].Plot.Series[0].Points[0].Y = math.NaN() },
		"no such category":        func(p *Page) { p.Sections[0].Figures[1].Plot.Series[0].Points[0].X = 3 },
		"a plot without numbers":  func(p *Page) { p.Sections[0].Figures[0].Table.Rows = nil },
		"a ragged table":          func(p *Page) { p.Sections[0].Figures[3].Table.Rows[0] = []string{"1"} },
		"figures of a failure":    func(p *Page) { p.Sections[1].Figures = p.Sections[0].Figures[3:] },
		"no status":               func(p *Page) { p.Sections[0].Status = 0 },
		"a repeated figure id":    func(p *Page) { p.Sections[0].Figures[1].ID = "lines" },
		"a plot with no kind":     func(p *Page) { p.Sections[0].Figures[0].Plot.Kind = 0 },
		"a plot without a series": func(p *Page) { p.Sections[0].Figures[0].Plot.Series = nil },
	} {
		t.Run(name, func(t *testing.T) {
			p := demoPage()
			edit(p)
			var b bytes.Buffer
			err := Write(&b, p)
			require.True(t, errors.Is(err, ErrModel), "%v", err)
			require.Zero(t, b.Len(), "a refused page writes nothing")
		})
	}
}

// Every status labels its section, and an audit is never called a check.
func TestReportStatusLabels(t *testing.T) {
	p := demoPage()
	p.Sections[0].Status = Audited
	page := write(t, p)
	require.Contains(t, page, `class="cert audited"`)
	require.Contains(t, page, "audit passed, not a full check")
	require.Contains(t, page, "Claim, audited")
	require.NotContains(t, page, "re-derived in full")
}

// Log axes are ticked at powers of ten whatever the span; gonum's own
// log ticks would label 1e+06 and crowd a span of 40 decades.
func TestReportDecadeTicks(t *testing.T) {
	labels := func(lo, hi float64) []string {
		var out []string
		for _, tk := range (decades{}).Ticks(lo, hi) {
			if tk.Label != "" {
				out = append(out, tk.Label)
			}
		}
		return out
	}
	require.Equal(t, []string{"0.01", "0.1", "1"}, labels(-2, 0))
	require.Equal(t, []string{"1", "10", "100", "1000", "10000", "100000", "1000000", "1e7"}, labels(0, 7))
	wide := labels(0, 40)
	require.LessOrEqual(t, len(wide), 9)
	require.Equal(t, "1", wide[0])
}
