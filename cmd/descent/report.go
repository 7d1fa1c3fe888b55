package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math/big"
	"os"
	"sort"
	"strconv"

	"descent/cert"
	"descent/check"
	"descent/check/kernel"
	"descent/report"
)

// report checks certificates and writes one HTML page of their claims,
// plots and tables. It fills the page model of package report from the
// checker's reports, in the claim words of show and check, and from the
// block records of a checked range, read with cert's decoder once they
// are bound to the checked root.
func (c *cli) report(ctx context.Context, args []string) int {
	fs := c.flags("report")
	sieve := fs.String("sieve", "", "the sieve certificate `FILE` the range certificates rest on")
	out := fs.String("o", "", "write the HTML page to `FILE`")
	sampleN := fs.Int("sample", 0, "audit range certificates: re-derive only `N` blocks of each, drawn from the root and -seed")
	seed := fs.String("seed", "", "the reader's own `seed` for drawing the audited blocks")
	workers := fs.Int("workers", 0, "parallel workers (default: all cores)")
	replace := fs.Bool("replace", false, "replace `FILE` if it exists")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	switch {
	case fs.NArg() == 0:
		c.errorf("report: no certificate given")
		fs.Usage()
		return exitUsage
	case *out == "":
		c.errorf("report: no output file; give -o FILE")
		return exitUsage
	case !c.workersOK("report", *workers):
		return exitUsage
	case *sampleN < 0:
		c.errorf("report: -sample %d: want a positive number of blocks", *sampleN)
		return exitUsage
	case *seed != "" && *sampleN == 0:
		c.errorf("report: -seed without -sample: the seed only draws the blocks of an audit")
		return exitUsage
	}
	var inputs []input
	for _, path := range fs.Args() {
		inputs = append(inputs, input{"a certificate reported on", path})
	}
	if *sieve != "" {
		inputs = append(inputs, input{"the -sieve file", *sieve})
	}
	if !c.outputOK("report", *out, *replace, inputs) {
		return exitUsage
	}

	chk := newChecker(check.Options{Workers: *workers, Options: kernel.Options{Draw: check.Sample(*sampleN, *seed)}}, *sieve, false)
	page := &report.Page{
		Title: "descent report",
		Intro: []string{"Each certificate below was checked by descent's independent checker before this page was written. " +
			"A section states a claim only if its check passed, and says whether that check re-derived every claim or audited a sample. " +
			"A certificate that failed is shown with the reason, and without plots. The plots picture the numbers in the tables under them; " +
			"the tables hold the exact values."},
	}
	status := exitOK
	var failed []string
	for _, path := range fs.Args() {
		rep := chk.file(path)
		status = max(status, exitStatus(rep))
		if !rep.Valid {
			failed = append(failed, path)
		}
		page.Sections = append(page.Sections, reportSection(rep, *sieve))
	}

	var html bytes.Buffer
	if err := report.Write(&html, page); err != nil {
		c.errorf("report: %s: %v", *out, err)
		return exitUsage
	}
	f, ok := c.createOutput(ctx, "report", *out, *replace, inputs)
	if !ok {
		return exitUsage
	}
	if _, err := f.WriteAt(html.Bytes(), 0); err != nil {
		f.abort()
		c.errorf("report: %v", err)
		return exitUsage
	}
	if err := f.commit(); err != nil {
		c.errorf("report: %s: %v", *out, err)
		return exitUsage
	}
	for _, path := range failed {
		c.errorf("report: %s failed its check; %s shows why", path, *out)
	}
	fmt.Fprintf(c.stdout, "%s: %s, %d failed\n", *out, count(len(page.Sections), "certificate", "certificates"), len(failed))
	return status
}

// reportSection puts one checker report into the page's words.
func reportSection(rep *Report, sievePath string) report.Section {
	s := report.Section{Title: rep.File, Kind: rep.Kind, Root: rep.Root}
	if s.Kind == "" {
		s.Kind = "certificate"
	}
	switch {
	case !rep.Valid:
		return failedSection(rep, s)
	case rep.Shard != nil || rep.Span != nil:
		return shardSection(rep, s)
	case rep.Kind == "sieve":
		return sieveSection(rep, s)
	case rep.Kind == "range":
		return rangeSection(rep, s, sievePath)
	}
	// A kind this command does not know how to picture: say so rather
	// than guess at its claim.
	s.Status = report.Partial
	s.Verdict = fmt.Sprintf("valid %s certificate; this page has no section for its kind", rep.Kind)
	return s
}

func failedSection(rep *Report, s report.Section) report.Section {
	s.Status, s.Root = report.Failed, ""
	s.Verdict = "INVALID: the certificate does not prove what it says"
	switch err := rep.Err(); {
	case errors.Is(err, kernel.ErrLimits):
		s.Verdict = "beyond this checker's limits: neither shown valid nor shown invalid"
	case errors.Is(err, kernel.ErrMalformed):
		s.Verdict = "MALFORMED or unreadable: not checked"
	}
	if rep.Root != "" {
		s.Facts = append(s.Facts, report.Fact{Label: "root as stored (not established)", Value: rep.Root})
	}
	s.Failure = &report.Failure{Reason: rep.Reason, Message: rep.Error}
	if w := rep.Where; w != nil {
		for _, f := range []report.Fact{{Label: "claim", Value: w.Claim}, {Label: "expected", Value: w.Expected}, {Label: "found", Value: w.Found}} {
			if f.Value != "" {
				s.Failure.Where = append(s.Failure.Where, f)
			}
		}
	}
	return s
}

func shardSection(rep *Report, s report.Section) report.Section {
	s.Status = report.Partial
	if sh := rep.Shard; sh != nil {
		s.Verdict = fmt.Sprintf("valid shard %d of %d (records %d to %d) of a whole certificate: the claims of its own records are re-derived",
			sh.Index, sh.Of, sh.First, sh.First+sh.Count-1)
	} else {
		s.Verdict = "valid in part: only a share of the records was re-derived"
	}
	s.Notes = []string{"A shard proves only the claims of its own records, so this page states no claim for it and draws no plot. " +
		"Merge the shards with 'descent merge' and report the whole certificate."}
	return s
}

// sieveSection: the claim in the words of show and check, the survivors
// after each step, the classes closing at each step, and the exceptions.
func sieveSection(rep *Report, s report.Section) report.Section {
	f := factsFromReport(rep)
	s.Status = report.Checked
	s.Verdict = "valid sieve certificate: every claim re-derived and every hash verified"
	s.Facts = []report.Fact{
		{Label: "map", Value: f.mapText()},
		{Label: "modulus", Value: fmt.Sprintf("2^%d (k = %d); classes may close at steps 1 to %d (j = %d)", f.K, f.K, f.J, f.J)},
		{Label: "survivors", Value: fmt.Sprintf("%d of the 2^%d residues", f.Survivors, f.K)},
	}
	if f.Joins {
		s.Facts = append(s.Facts, report.Fact{Label: "joined", Value: fmt.Sprintf("%d of the survivors; %d remain to search", f.Joined, f.Survivors-f.Joined)})
	}
	s.Facts = append(s.Facts, report.Fact{Label: "fate cap", Value: count(int(f.Cap), "step", "steps")})
	s.Claim, s.Caution = f.sentence(), f.caveat()
	steps := stepsOfT(f.Map)

	closed := make([]uint64, f.J+1)
	for _, cl := range f.Closing {
		if cl.Step >= 1 && cl.Step <= f.J {
			closed[cl.Step] = cl.Classes
		}
	}
	// The classes open after step t, mod 2^t: each open class splits in
	// two at the next step, and the closing ones leave.
	open := big.NewInt(1)
	surv := report.Figure{ID: "survivors", Title: "Survivors as a share of the residues, after each step",
		Caption: fmt.Sprintf("The classes mod 2^t still open after t %s, divided by 2^t; log scale. "+
			"Derived from the checked closing counts: open(t) = 2 open(t-1) - closing(t), open(0) = 1. "+
			"Classes may close only at steps 1 to %d.", steps, f.J),
		Plot: &report.Plot{Kind: report.Lines,
			X: report.Axis{Label: "step t (" + stepsAxis + ")"},
			Y: report.Axis{Label: "open classes / 2^t (log scale)", Log: true}},
		Table: report.Table{Columns: []string{"step t", "classes open mod 2^t", "share of the 2^t residues"}},
	}
	var pts []report.XY
	for t := 1; t <= f.J; t++ {
		open.Lsh(open, 1).Sub(open, new(big.Int).SetUint64(closed[t]))
		share := ratio(open, t)
		pts = append(pts, report.XY{X: float64(t), Y: share})
		surv.Table.Rows = append(surv.Table.Rows, []string{strconv.Itoa(t), open.String(), strconv.FormatFloat(share, 'g', 6, 64)})
	}
	surv.Plot.Series = []report.Series{{Points: pts}}

	closing := report.Figure{ID: "closing", Title: "Classes closing at each step",
		Caption: fmt.Sprintf("How many classes r mod 2^t close at step t (%s); log scale. "+
			"A step with no closing class has no bar; the table lists every step.", steps),
		Plot: &report.Plot{Kind: report.Bars,
			X: report.Axis{Label: "step t at which the class closes (" + stepsAxis + ")"},
			Y: report.Axis{Label: "classes mod 2^t (log scale)", Log: true}},
		Table: report.Table{Columns: []string{"step t", "classes mod 2^t", fmt.Sprintf("residues mod 2^%d", f.K)}},
	}
	pts = nil
	for t := 1; t <= f.J; t++ {
		if closed[t] > 0 {
			pts = append(pts, report.XY{X: float64(t), Y: float64(closed[t])})
		}
		res := new(big.Int).Lsh(new(big.Int).SetUint64(closed[t]), uint(f.K-t))
		closing.Table.Rows = append(closing.Table.Rows, []string{strconv.Itoa(t), strconv.FormatUint(closed[t], 10), res.String()})
	}
	closing.Plot.Series = []report.Series{{Points: pts}}

	exc := report.Figure{ID: "exceptions", Title: "Exceptions",
		Caption: fmt.Sprintf("Members at or below their class's threshold, each decided by direct iteration within %s, below the ceiling 2^%d.", count(int(f.Cap), "step", "steps"), f.Ceiling),
		Table:   report.Table{Columns: []string{"n", "fate"}},
	}
	for _, e := range f.Exceptions {
		exc.Table.Rows = append(exc.Table.Rows, []string{e.N, e.fateText(f.Cap, f.Ceiling)})
	}
	s.Figures = []report.Figure{surv, closing, exc}
	return s
}

// stepsOfT names the step convention of every step count on the page, in
// captions; axes say "steps of T" for short, T written out in the facts.
func stepsOfT(m string) string {
	return fmt.Sprintf("steps of T: n/2 or (%s)/2 each count one", m)
}

const stepsAxis = "steps of T"

// ratio is x / 2^t, for drawing.
func ratio(x *big.Int, t int) float64 {
	v, _ := new(big.Float).SetMantExp(new(big.Float).SetInt(x), -t).Float64()
	return v
}

func toFloat(n Num) float64 {
	x, ok := new(big.Int).SetString(string(n), 10)
	if !ok {
		return 0
	}
	v, _ := new(big.Float).SetInt(x).Float64()
	return v
}

// rangeSection: the claim in the words of show and check, how the numbers
// are justified, the stopping-time records, and the largest stopping time
// per block.
func rangeSection(rep *Report, s report.Section, sievePath string) report.Section {
	f := rangeFactsFromReport(rep)
	s.Status = report.Checked
	s.Verdict = "valid range certificate: every block re-derived and every hash verified"
	if a := rep.Audit; a != nil {
		s.Status = report.Audited
		s.Verdict = fmt.Sprintf("passes an audit of %d of its %d blocks (not a full check): the drawn blocks are re-derived, "+
			"the totals are checked against every block record, and every hash is verified", a.Audited, a.Blocks)
	}
	s.Facts = []report.Fact{
		{Label: "map", Value: fmt.Sprintf("T(n) = n/2 for even n, (%s)/2 for odd n", f.Map)},
		{Label: "range", Value: fmt.Sprintf("[%s, %s)", f.Lo, f.Hi)},
		{Label: "sieve", Value: fmt.Sprintf("%s (k = %d), checked from %s", f.SieveRoot, f.K, sievePath)},
		{Label: "blocks", Value: fmt.Sprintf("%d of 2^%d numbers", rep.Chunks, f.E)},
		{Label: "step cap", Value: strconv.FormatUint(uint64(f.Cap), 10)},
	}
	s.Claim, s.Caution = f.sentence(), f.caveat()
	steps := stepsOfT(f.Map)
	rules := len(f.Counts.Rules) > 0

	var drawn map[int]bool
	if a := rep.Audit; a != nil {
		s.Facts = append(s.Facts, report.Fact{Label: "audit seed", Value: fmt.Sprintf("%s (repeat the audit with -seed %s)", a.Seed, a.Seed)})
		drawn = map[int]bool{}
		for _, i := range a.Drawn {
			drawn[i] = true
		}
		odds := report.Figure{ID: "audit", Title: "What the audit shows",
			Caption: "The chance that this audit passes although some blocks are wrong, drawing without replacement.",
			Table:   report.Table{Columns: []string{"blocks wrong", "share of the blocks", "chance the audit passes anyway"}}}
		seen := map[int]bool{}
		for _, p := range a.PassIfWrong {
			if seen[p.WrongBlocks] {
				continue // a small range rounds several shares to one block
			}
			seen[p.WrongBlocks] = true
			odds.Table.Rows = append(odds.Table.Rows, []string{strconv.Itoa(p.WrongBlocks),
				strconv.FormatFloat(100*float64(p.WrongBlocks)/float64(a.Blocks), 'g', 3, 64) + "%", strconv.FormatFloat(p.Pass, 'g', 3, 64)})
		}
		s.Figures = append(s.Figures, odds)
	}

	// How the numbers are justified.
	just := report.Figure{ID: "justification", Title: "How the numbers are justified",
		Caption: "Numbers of the range by the way the checker justifies them; log scale. A count of 0 has no bar.",
		Plot: &report.Plot{Kind: report.Bars,
			X: report.Axis{Label: "justification"},
			Y: report.Axis{Label: "numbers (log scale)", Log: true}},
		Table: report.Table{Columns: []string{"justification", "numbers"}},
	}
	type row struct {
		short, long string
		n           Num
	}
	rows := []row{
		{"sieve", "in a closing class of the sieve (stopping time = its closing step)", f.Counts.Sieve},
		{"search", "in a survivor class, iterated until it drops", f.Counts.Search},
		{"small", "small, iterated directly until it drops", f.Counts.Small},
		{"cycle", "reaches a cycle without dropping", f.Counts.Cycle},
		{"undecided", "undecided within the step cap", f.Counts.Undecided},
	}
	for i, r := range f.Counts.Rules {
		rows = append(rows, row{fmt.Sprintf("rule %d", i+1), fmt.Sprintf("rule %d: of the form %s, resting on the smaller predecessor %s (%s)",
			i+1, r.Class, r.Predecessor, count(r.Steps, "step", "steps")), r.Numbers})
	}
	var pts []report.XY
	for i, r := range rows {
		just.Plot.X.Categories = append(just.Plot.X.Categories, r.short)
		if v := toFloat(r.n); v > 0 {
			pts = append(pts, report.XY{X: float64(i), Y: v})
		}
		just.Table.Rows = append(just.Table.Rows, []string{r.long, string(r.n)})
	}
	just.Plot.Series = []report.Series{{Points: pts}}
	s.Figures = append(s.Figures, just)

	among := ""
	if rules {
		among = " Numbers resting on a predecessor rule are not searched and have no stopping time here."
	}
	spans, err := boundBlocks(rep)
	if err != nil {
		s.Notes = append(s.Notes, fmt.Sprintf("The per-block figures are left out: %v.", err))
	}
	status := func(i int) string {
		switch {
		case drawn == nil:
			return "re-derived"
		case drawn[i]:
			return "re-derived by the audit"
		}
		return "bound to the root by its hash, not re-derived"
	}

	// Stopping-time records: n on a log scale when the range spans
	// decades, and counted from its start when it is narrow, where a log
	// scale would pile every point onto one spot.
	lo, _ := new(big.Int).SetString(f.Lo, 10)
	hi, _ := new(big.Int).SetString(f.Hi, 10)
	wide := lo == nil || hi == nil || hi.Cmp(new(big.Int).Mul(lo, big.NewInt(100))) >= 0
	xOf := func(n Num) float64 { return toFloat(n) }
	xAxis := report.Axis{Label: "n (log scale)", Log: true}
	scale := "n on a log scale"
	if !wide {
		xOf = func(n Num) float64 {
			x, _ := new(big.Int).SetString(string(n), 10)
			v, _ := new(big.Float).SetInt(x.Sub(x, lo)).Float64()
			return v
		}
		xAxis = report.Axis{Label: "n - " + f.Lo}
		scale = "n counted from the start of the range"
	}
	rec := report.Figure{ID: "records", Title: "Stopping-time records",
		Caption: fmt.Sprintf("Each n whose stopping time (the least i with T^i(n) < n, in %s) exceeds that of every smaller n in the range; %s.%s", steps, scale, among),
		Plot:    &report.Plot{Kind: report.Points, X: xAxis, Y: report.Axis{Label: "stopping time (" + stepsAxis + ")"}},
		Table:   report.Table{Columns: []string{"n", "stopping time"}},
	}
	series := map[string]*report.Series{}
	var order []string
	for _, r := range f.Records {
		cells := []string{string(r.N), strconv.FormatUint(uint64(r.StoppingTime), 10)}
		name := ""
		if drawn != nil {
			name = "?"
			if i, ok := blockOf(spans, r.N); ok {
				name = status(i)
			}
			cells = append(cells, name)
		}
		if series[name] == nil {
			series[name] = &report.Series{Name: name}
			order = append(order, name)
		}
		series[name].Points = append(series[name].Points, report.XY{X: xOf(r.N), Y: float64(r.StoppingTime)})
		rec.Table.Rows = append(rec.Table.Rows, cells)
	}
	if drawn != nil {
		rec.Table.Columns = append(rec.Table.Columns, "its block")
		rec.Caption += " In this audit the records of the blocks not drawn are bound to the root by their hashes and consistent with the totals, not re-derived."
	}
	sort.Strings(order)
	for _, name := range order {
		rec.Plot.Series = append(rec.Plot.Series, *series[name])
	}
	if len(f.Records) == 0 {
		rec.Plot = nil
	}
	s.Figures = append(s.Figures, rec)

	if err == nil {
		s.Figures = append(s.Figures, blockMaxFigure(spans, f, steps, among, status, drawn != nil))
	}

	cyc := report.Figure{ID: "cycles", Title: "Cycles reached without dropping",
		Caption: "Each cycle by its smallest member, with how many numbers of the range reach it without first dropping below themselves.",
		Table:   report.Table{Columns: []string{"smallest member", "numbers"}}}
	for _, c := range f.Cycles {
		cyc.Table.Rows = append(cyc.Table.Rows, []string{string(c.Min), string(c.Count)})
	}
	s.Figures = append(s.Figures, cyc)

	und := report.Figure{ID: "undecided", Title: "Undecided numbers",
		Caption: fmt.Sprintf("Numbers neither shown to drop nor to reach a cycle within %d steps.", f.Cap),
		Table:   report.Table{Columns: []string{"n"}}}
	for i, n := range rep.Undecided {
		if i == maxUndecidedRows {
			und.Caption += fmt.Sprintf(" The first %d of %d are listed; 'descent check -json' lists them all.", maxUndecidedRows, len(rep.Undecided))
			break
		}
		und.Table.Rows = append(und.Table.Rows, []string{string(n)})
	}
	s.Figures = append(s.Figures, und)
	return s
}

// maxUndecidedRows bounds the undecided numbers listed on the page.
const maxUndecidedRows = 1000

// maxReportBlocks bounds the blocks of the per-block figure: beyond it
// the plot and its table would outgrow a page.
const maxReportBlocks = 1 << 14

// boundBlocks reads the block records of a checked range with cert's
// decoder. It reads the file afresh, so it requires the stored tree to be
// consistent, its root to be the root the checker established, and every
// record to match its leaf: the records are then the ones bound to that
// root, whatever happened to the file since the check.
func boundBlocks(rep *Report) ([]blockSpan, error) {
	if rep.Chunks > maxReportBlocks {
		return nil, fmt.Errorf("the certificate has %d blocks, more than the %d this page draws", rep.Chunks, maxReportBlocks)
	}
	file, err := os.Open(rep.File)
	if err != nil {
		return nil, err
	}
	defer file.Close()
	rd, err := cert.NewReader(file)
	if err != nil {
		return nil, err
	}
	if err := rd.CheckTree(); err != nil {
		return nil, err
	}
	if rd.Root().String() != rep.Root {
		return nil, fmt.Errorf("%s changed after its check: its root is now %v", rep.File, rd.Root())
	}
	h, err := cert.ParseRangeHeader(rd.Header)
	if err != nil {
		return nil, err
	}
	var blocks []*cert.Block
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, err
		}
		if cert.LeafHash(rec) != rd.Levels[0][i+1] {
			return nil, fmt.Errorf("block %d of %s does not match its hash", i, rep.File)
		}
		b, err := cert.ParseBlock(rec, rd.Offs[i], len(h.Rules))
		if err != nil {
			return nil, err
		}
		blocks = append(blocks, b)
	}
	// Block i covers [(B0+i)*2^E, (B0+i+1)*2^E) within [Lo, Hi), with
	// B0 = Lo >> E (SPEC.md, section 6).
	first, _ := cert.BlockSpan(h.Lo, h.Hi, h.E)
	spans := make([]blockSpan, len(blocks))
	for i, b := range blocks {
		from := new(big.Int).Lsh(new(big.Int).Add(first, big.NewInt(int64(i))), uint(h.E))
		to := new(big.Int).Lsh(new(big.Int).Add(first, big.NewInt(int64(i+1))), uint(h.E))
		if from.Cmp(h.Lo) < 0 {
			from.Set(h.Lo)
		}
		if to.Cmp(h.Hi) > 0 {
			to.Set(h.Hi)
		}
		spans[i] = blockSpan{Block: b, From: from, To: to}
	}
	return spans, nil
}

// blockSpan is a block record with the numbers it covers, [From, To).
type blockSpan struct {
	*cert.Block
	From, To *big.Int
}

// blockOf finds the block that holds n.
func blockOf(spans []blockSpan, n Num) (int, bool) {
	x, ok := new(big.Int).SetString(string(n), 10)
	if !ok {
		return 0, false
	}
	i := sort.Search(len(spans), func(i int) bool { return spans[i].To.Cmp(x) > 0 })
	return i, i < len(spans) && spans[i].From.Cmp(x) <= 0
}

// blockMaxFigure plots the largest stopping time of each block.
func blockMaxFigure(spans []blockSpan, f rangeFacts, steps, among string, status func(int) string, audit bool) report.Figure {
	fig := report.Figure{ID: "block-max", Title: "Largest stopping time in each block",
		Caption: fmt.Sprintf("For each block of 2^%d numbers (the first and last may be shorter), the largest stopping time in it, in %s; "+
			"blocks counted from 0, the first holding n = %s. A block in which no number drops has no point.%s", f.E, steps, f.Lo, among),
		Plot: &report.Plot{Kind: report.Points,
			X: report.Axis{Label: fmt.Sprintf("block (2^%d numbers each), from the one holding n = %s", f.E, f.Lo)},
			Y: report.Axis{Label: "largest stopping time (" + stepsAxis + ")"}},
		Table: report.Table{Columns: []string{"block", "numbers from", "to (not included)", "largest stopping time", "first at n", "block record"}},
	}
	series := map[string]*report.Series{}
	var order []string
	for i, b := range spans {
		st := status(i)
		max, at := "none drops", ""
		if b.MaxAt != nil {
			max, at = strconv.FormatUint(uint64(b.MaxSigma), 10), b.MaxAt.String()
			if series[st] == nil {
				series[st] = &report.Series{Name: st}
				order = append(order, st)
			}
			series[st].Points = append(series[st].Points, report.XY{X: float64(i), Y: float64(b.MaxSigma)})
		}
		fig.Table.Rows = append(fig.Table.Rows, []string{strconv.Itoa(i), b.From.String(), b.To.String(), max, at, st})
	}
	sort.Strings(order)
	for _, name := range order {
		fig.Plot.Series = append(fig.Plot.Series, *series[name])
	}
	if len(order) == 0 {
		fig.Plot = nil
	}
	if audit {
		fig.Caption += " In this audit only the blocks drawn were re-derived; the others are bound to the root by their hashes."
	}
	return fig
}
