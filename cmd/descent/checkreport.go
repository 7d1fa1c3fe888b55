package main

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math/big"
	"runtime"
	"runtime/debug"
	"sort"
	"strconv"
	"strings"

	"descent/check"
	"descent/check/kernel"
)

// The report of a check, as check -json writes it and as show, report,
// receipts and the archive read it: made here from the checker's plain
// result (package check/kernel), or from a header as written (show).

// Where locates a failure in a report: kernel.Where with JSON keys.
type Where struct {
	Offset   *int64 `json:"offset,omitempty"`
	Chunk    *int   `json:"chunk,omitempty"`
	Residue  string `json:"residue,omitempty"`
	Step     int    `json:"step,omitempty"`
	N        string `json:"n,omitempty"`
	Claim    string `json:"claim,omitempty"`
	Expected string `json:"expected,omitempty"`
	Found    string `json:"found,omitempty"`
}

// MarshalJSON writes n and residue as numbers (strings above 2^53), like
// every other integer of a report.
func (w Where) MarshalJSON() ([]byte, error) {
	type plain Where
	return json.Marshal(struct {
		plain
		Residue Num `json:"residue,omitempty"`
		N       Num `json:"n,omitempty"`
	}{plain(w), Num(w.Residue), Num(w.N)})
}

// Num is a non-negative integer that JSON carries as a number up to 2^53
// and as a decimal string above, where JSON readers lose precision.
type Num string

func numU(x uint64) Num { return Num(strconv.FormatUint(x, 10)) }

func (n Num) MarshalJSON() ([]byte, error) {
	if v, err := strconv.ParseUint(string(n), 10, 64); err == nil && v <= 1<<53 {
		return []byte(n), nil
	}
	return json.Marshal(string(n))
}

// ExceptionReport is one exception as the checker found it.
type ExceptionReport struct {
	N        Num    `json:"n"`
	Fate     string `json:"fate"`            // descends, cycle or undecided
	Steps    uint32 `json:"steps,omitempty"` // descends: after this many steps of T
	CycleMin Num    `json:"cycle_min,omitempty"`
}

// How much of a certificate a report re-derived (JSON "mode"). A report is
// a full check of the whole certificate only in ModeFull on a file that is
// not a shard; Checked says in words what was re-derived.
const (
	ModeFull      = kernel.ModeFull  // every record of the file
	ModeAudit     = kernel.ModeAudit // the blocks of a range drawn by a seed
	ModeShare     = kernel.ModeShare // share i of N of the file's records
	ModePart      = kernel.ModePart  // records of a whole certificate, against a published root
	ModeUnchecked = "unchecked"      // nothing: the claim as written (descent show)
)

// Report is the outcome of checking one certificate. The claim fields come
// from the header and are filled in as far as the header could be read;
// they are proven only when Valid is true, and then only as far as Mode
// and Checked say.
type Report struct {
	// JSON keys are chosen per kind by MarshalJSON.
	File      string
	Mode      string
	Valid     bool
	Checker   *BuildInfo // the program that checked, from its build information
	Kind      string
	Root      string
	Map       string
	K         int
	J         int
	Cap       uint32
	Ceiling   int // W, in bits: an iterate of 2^W or more stops a search or fate, undecided
	Chunks    int
	Survivors Num // a sieve with joins: the survivors not joined, still to search
	// A sieve with joins: the survivors joined to smaller residues, and all
	// survivors, joined or not.
	Joined, SieveSurvivors Num
	ClosedAt               map[string]Num // step -> classes mod 2^step closing there
	Exceptions             []ExceptionReport
	// Range certificates.
	SieveRoot string
	From      Num
	To        Num
	BlockExp  int
	Counts    *RangeCounts
	// Records and MaxStoppingTime are over the numbers whose stopping time
	// the certificate states (Counts.Stated), not over the whole range.
	Records         []RecordReport
	MaxStoppingTime *RecordReport
	Cycles          []CycleReport
	Undecided       []Num
	// Below: what each number below From reaches, by direct iteration
	// within the cap, derived when From <= 2 (then there is at most the
	// number 1); nil when not derived.
	Below     *[]ExceptionReport
	Audit     *Audit
	Shard     *SpanReport // a shard file: which records of the whole it holds
	Span      *SpanReport // a share checked with Options.Span, or the records of a part check
	BytesRead int64       // a part check: the bytes of the file it read
	Partial   bool        // only part of the claims were re-derived (-shard, -part, -sample, a shard file)

	// The claim in words and what it does not prove, filled in by the
	// command (they depend on wording the checker does not own).
	Claim, NotProven string

	Reason string
	Error  string
	Hint   string // for the reader's own mistakes: what to do instead
	Where  *Where

	failure *kernel.Failure
}

// Err returns nil for a valid certificate and the failure otherwise.
func (r *Report) Err() error {
	if r.failure == nil {
		return nil
	}
	return r.failure
}

func (r *Report) fail(f *kernel.Failure) *Report {
	r.Valid, r.failure = false, f
	r.Reason, r.Error, r.Hint = f.Reason, f.Error(), f.Hint
	w := Where(f.Where)
	if f.Derived != nil && f.Stated != nil {
		if d := diff(blockFields(f.Derived), blockFields(f.Stated)); d != nil {
			w.Claim, w.Expected, w.Found = w.Claim+": "+d.name, d.want, d.got
			r.Error += fmt.Sprintf(": %s: expected %s, found %s", d.name, d.want, d.got)
		}
	}
	r.Where = &w
	return r
}

// field is one field of a summary or block as text, and how to name it.
type field struct{ name, value string }

var countNames = [6]string{"numbers justified by the sieve", "numbers justified by a join", "numbers found to drop by search",
	"small numbers found to drop by direct iteration", "numbers that reach a cycle", "undecided numbers"}

// blockFields lists a block's fields (a header's totals: its summary's) in
// the order a difference is named: a list's length before its entries, so
// that two lists differ first in it.
func blockFields(b *kernel.Block) []field {
	var out []field
	s := &b.Summary
	for c, x := range s.Counts {
		out = append(out, field{countNames[c], x.String()})
	}
	out = append(out, field{"rule counts", strconv.Itoa(len(s.Rules))})
	for i, x := range s.Rules {
		out = append(out, field{fmt.Sprintf("numbers justified by predecessor rule %d", i), x.String()})
	}
	out = append(out, field{"sum of stopping times", s.Sum.String()}, field{"largest stopping time", fmt.Sprintf("%d at %v", s.MaxSigma, s.MaxAt)},
		field{"records", strconv.Itoa(len(s.Records))})
	for j, p := range s.Records {
		out = append(out, field{fmt.Sprintf("record %d", j), fmt.Sprintf("%v (%d steps)", p.N, p.Sigma)})
	}
	out = append(out, field{"cycles", strconv.Itoa(len(s.Cycles))})
	for j, c := range s.Cycles {
		out = append(out, field{fmt.Sprintf("cycle %d", j), fmt.Sprintf("%v (%v numbers)", c.Min, c.Count)})
	}
	out = append(out, field{"undecided numbers", strconv.Itoa(len(b.Undecided))})
	for j, n := range b.Undecided {
		out = append(out, field{fmt.Sprintf("undecided number %d", j), n.String()})
	}
	return out
}

type difference struct{ name, want, got string }

// diff names the first field in which two lists differ, or nil.
func diff(want, got []field) *difference {
	for i := range min(len(want), len(got)) {
		if want[i] != got[i] {
			return &difference{want[i].name, want[i].value, got[i].value}
		}
	}
	return nil
}

// parseRoot reads a root in hex, as roots are published.
func parseRoot(s string) (kernel.Hash, error) {
	var h kernel.Hash
	b, err := hex.DecodeString(s)
	if err != nil || len(b) != len(h) {
		return h, fmt.Errorf("root %q: want %d hex digits", s, 2*len(h))
	}
	return kernel.Hash(b), nil
}

// RangeCounts says how the numbers of a range are justified.
type RangeCounts struct {
	Sieve     Num `json:"sieve"`     // in a closing class: T^t(n) < n, t the stopping time
	Join      Num `json:"join"`      // in a joined class: meets n - delta after k steps
	Search    Num `json:"search"`    // in a survivor class, found to drop by iteration
	Small     Num `json:"small"`     // at most the small bound, found to drop by direct iteration
	Cycle     Num `json:"cycle"`     // reach a cycle without dropping
	Undecided Num `json:"undecided"` // neither within the cap
	// StoppingTimeSum is over the Stated numbers only; JSON carries it in
	// "stated_stopping_times".
	StoppingTimeSum Num `json:"-"`
	// Rules: the numbers of survivor classes justified by each predecessor
	// rule instead of a search; the certificate states no stopping time
	// for them.
	Rules []RuleReport `json:"rules"`
}

// Stated is the number of numbers whose stopping time the certificate
// states: those justified by the sieve, by search and as small numbers.
func (c *RangeCounts) Stated() Num {
	t := new(big.Int)
	for _, x := range []Num{c.Sieve, c.Search, c.Small} {
		if v, ok := new(big.Int).SetString(string(x), 10); ok {
			t.Add(t, v)
		}
	}
	return Num(t.String())
}

// RuleReport is a predecessor rule with the numbers it justified: every
// n = Class (q >= 0) has the smaller predecessor Predecessor, which reaches
// n in Steps steps.
type RuleReport struct {
	Class       string `json:"class"`
	Predecessor string `json:"predecessor"`
	Steps       int    `json:"steps"`
	Numbers     Num    `json:"numbers"`
}

// RecordReport is a number with its stopping time in steps of T, and, when
// the command worked it out, in standard steps (an+b and n/2 counted
// apart: the stopping time plus the odd steps among them).
type RecordReport struct {
	N             Num    `json:"n"`
	StoppingTime  uint32 `json:"steps"`
	StandardSteps uint64 `json:"standard_steps,omitempty"`
}

// CycleReport is a cycle, by its smallest member, and how many numbers of
// the range reach it without dropping below themselves.
type CycleReport struct {
	Min   Num `json:"min"`
	Count Num `json:"count"`
}

// Audit describes a sampled check of a range.
type Audit struct {
	Blocks  int `json:"blocks"`  // the blocks the draw was from
	Audited int `json:"audited"` // the blocks drawn and re-derived
	// Seed: repeat the audit with it. SeedFrom says who chose it: "reader"
	// (given with the check; it proves something only if the writer could
	// not know it) or "random" (drawn by the checker).
	Seed        string       `json:"seed"`
	SeedFrom    string       `json:"seed_from"`
	PassIfWrong []PassChance `json:"pass_if_wrong"`
	Drawn       []int        `json:"-"` // the blocks re-derived, in the order drawn
}

// PassChance is the chance that the audit passes if Share of the blocks
// (WrongBlocks of them) were wrong.
type PassChance struct {
	Share       float64 `json:"share"`
	WrongBlocks int     `json:"wrong_blocks"`
	Pass        float64 `json:"pass"`
}

// BuildInfo names the program that made a report.
type BuildInfo struct {
	Module   string `json:"module"`
	Version  string `json:"version"`
	Revision string `json:"revision,omitempty"`
	Time     string `json:"time,omitempty"`
	Modified bool   `json:"modified,omitempty"`
	Go       string `json:"go"`
}

// Version reads the module version and the VCS revision from the build
// information of the running program.
func Version() BuildInfo {
	v := BuildInfo{Module: "descent", Version: "unknown", Go: runtime.Version()}
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return v
	}
	if info.Main.Path != "" {
		v.Module = info.Main.Path
	}
	if info.Main.Version != "" {
		v.Version = info.Main.Version
	}
	if info.GoVersion != "" {
		v.Go = info.GoVersion
	}
	for _, s := range info.Settings {
		switch s.Key {
		case "vcs.revision":
			v.Revision = s.Value
		case "vcs.time":
			v.Time = s.Value
		case "vcs.modified":
			v.Modified = s.Value == "true"
		}
	}
	return v
}

// Checked says in words what the report re-derived, and what it did not.
func (r *Report) Checked() string {
	rng := strings.HasPrefix(r.Kind, "range")
	unit, units := "chunk", "chunks"
	if rng {
		unit, units = "block", "blocks"
	}
	span := func(s *SpanReport) string {
		if s.Count == 1 {
			return fmt.Sprintf("%s %d", unit, s.First)
		}
		return fmt.Sprintf("%s %d to %d", units, s.First, s.First+s.Count-1)
	}
	of := ""
	if r.Shard != nil {
		of = " of the whole"
	}
	joins := ""
	if r.Joined != "" {
		joins = ", their joins included"
	}
	if r.Mode == ModeUnchecked {
		return "nothing: this is the claim as written in the file, whose stored tree agrees with its header; 'descent check' re-derives it"
	}
	if !r.Valid {
		return "the check stopped at the first failure (reason, error, where); nothing in this report is shown valid"
	}
	var did, not []string
	switch {
	case r.Mode == ModePart:
		did = append(did, fmt.Sprintf("the header and %s, each against the given root through its audit path", span(r.Span)))
	case r.Shard != nil:
		did = append(did, "every hash of the shard")
	default:
		did = append(did, "every hash")
	}
	if rng {
		did = append(did, "the sieve it rests on", "its predecessor rules, for all q")
	}
	switch {
	case r.Mode == ModeAudit && r.Audit != nil:
		from := fmt.Sprintf("the %d %s of the file", r.Audit.Blocks, units)
		if r.Span != nil {
			from = fmt.Sprintf("%s%s (share %d of %d)", span(r.Span), of, r.Span.Index, r.Span.Of)
		} else if r.Shard != nil {
			from = fmt.Sprintf("the shard's %d (%s%s)", r.Audit.Blocks, span(r.Shard), of)
		}
		did = append(did, fmt.Sprintf("the claims of %d %s drawn by the seed from %s, re-derived", r.Audit.Audited, pluralWord(r.Audit.Audited, unit, units), from))
		not = append(not, fmt.Sprintf("the claims of the %s not drawn", units))
	case r.Span != nil && r.Mode == ModeShare:
		did = append(did, fmt.Sprintf("the claims of %s%s (share %d of %d)%s, re-derived", span(r.Span), of, r.Span.Index, r.Span.Of, joins))
		if !r.ShareIsAll() {
			not = append(not, fmt.Sprintf("the claims of the other %s", units))
		}
	case r.Mode == ModePart:
		did = append(did, fmt.Sprintf("the claims of %s%s, re-derived", span(r.Span), joins))
		not = append(not, fmt.Sprintf("the other %s, which were not read", units))
	case r.Shard != nil:
		did = append(did, fmt.Sprintf("the claims of its %s (%s%s)%s, re-derived", units, span(r.Shard), of, joins))
	default:
		did = append(did, fmt.Sprintf("the claims of every %s%s, re-derived", unit, joins))
	}
	switch {
	case rng && r.Shard != nil:
		not = append(not, "the whole's totals, which a shard does not hold")
	case rng && r.Mode == ModePart:
		not = append(not, "the header's totals")
	case rng && r.Mode == ModeFull:
		did = append(did, "the header's totals, added up from the blocks")
	case rng:
		did = append(did, "the header's totals, added up from the blocks as written")
	case r.Mode == ModeFull && r.Shard == nil:
		did = append(did, "the header's counts, added up from the chunks", "every exception, found afresh with its fate")
	default:
		did = append(did, "the header's counts, from the map alone", "every exception, found afresh with its fate")
		if r.Joined != "" {
			not = append(not, "the header's count of joins, which needs every chunk")
		}
	}
	if r.Shard != nil {
		not = append(not, "the other shards")
	}
	s := strings.Join(did, "; ")
	if len(not) > 0 {
		s += ". Not checked: " + strings.Join(not, "; ")
	}
	return s
}

// ShareIsAll says whether a share (ModeShare) holds every record of the
// file, as share 0 of 1 does.
func (r *Report) ShareIsAll() bool {
	if r.Span == nil {
		return false
	}
	if r.Shard != nil {
		return r.Span.Count == r.Shard.Count
	}
	return r.Span.Count == r.Chunks
}

func pluralWord(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// stepCounts writes closed_at as an object in numeric order of the step
// (a Go map would be written in the order of its keys as strings).
type stepCounts map[string]Num

func (m stepCounts) MarshalJSON() ([]byte, error) {
	if m == nil {
		return []byte("null"), nil
	}
	steps := make([]int, 0, len(m))
	for k := range m {
		t, err := strconv.Atoi(k)
		if err != nil {
			return nil, fmt.Errorf("closed_at: step %q", k)
		}
		steps = append(steps, t)
	}
	sort.Ints(steps)
	var b bytes.Buffer
	b.WriteByte('{')
	for i, t := range steps {
		if i > 0 {
			b.WriteByte(',')
		}
		v, err := m[strconv.Itoa(t)].MarshalJSON()
		if err != nil {
			return nil, err
		}
		fmt.Fprintf(&b, "%q:%s", strconv.Itoa(t), v)
	}
	b.WriteByte('}')
	return b.Bytes(), nil
}

// statedStoppingTimes groups the figures of a range that are over the
// numbers whose stopping time the certificate states, so that no reader
// takes them for figures over the whole range.
type statedStoppingTimes struct {
	Over    []string       `json:"over"`     // the counts these numbers make up
	StepsOf string         `json:"steps_of"` // the step convention: steps of T
	Numbers Num            `json:"numbers"`
	Sum     Num            `json:"sum"`
	Max     *RecordReport  `json:"max"`
	Records []RecordReport `json:"records"`
}

// MarshalJSON writes the keys of the report's kind: a sieve report always
// has exceptions, a range report always has its stated stopping times,
// cycles and undecided numbers. "valid" is left out of a report that
// re-derived nothing (ModeUnchecked).
func (r *Report) MarshalJSON() ([]byte, error) {
	type common struct {
		Checker *BuildInfo `json:"checker,omitempty"`
		File    string     `json:"file,omitempty"`
		Mode    string     `json:"mode"`
		Valid   *bool      `json:"valid,omitempty"`
		Checked string     `json:"checked"`
		Partial *bool      `json:"partial,omitempty"`
		Kind    string     `json:"kind,omitempty"`
		Root    string     `json:"root,omitempty"`
		Map     string     `json:"map,omitempty"`
	}
	type failure struct {
		Reason string `json:"reason,omitempty"`
		Error  string `json:"error,omitempty"`
		Hint   string `json:"hint,omitempty"`
		Where  *Where `json:"where,omitempty"`
	}
	type words struct {
		Claim     string `json:"claim,omitempty"`
		NotProven string `json:"not_proven,omitempty"`
	}
	c := common{Checker: r.Checker, File: r.File, Mode: r.Mode, Checked: r.Checked(), Kind: r.Kind, Root: r.Root, Map: r.Map}
	if r.Mode != ModeUnchecked { // valid and partial say what a check found
		v, p := r.Valid, r.Partial
		c.Valid, c.Partial = &v, &p
	}
	f := failure{r.Reason, r.Error, r.Hint, r.Where}
	w := words{r.Claim, r.NotProven}
	if r.Kind == "range" || r.Kind == "range shard" {
		var st *statedStoppingTimes
		if r.Counts != nil {
			st = &statedStoppingTimes{Over: []string{"sieve", "search", "small"}, StepsOf: "T", Numbers: r.Counts.Stated(),
				Sum: r.Counts.StoppingTimeSum, Max: r.MaxStoppingTime, Records: orEmpty(r.Records)}
		}
		return marshal(struct {
			common
			SieveRoot string               `json:"sieve_root"`
			From      Num                  `json:"from"`
			To        Num                  `json:"to"`
			K         int                  `json:"k"`
			BlockExp  int                  `json:"block_exponent"`
			Cap       uint32               `json:"cap"`
			Ceiling   int                  `json:"ceiling"`
			Blocks    int                  `json:"blocks"`
			Counts    *RangeCounts         `json:"counts"`
			Stated    *statedStoppingTimes `json:"stated_stopping_times"`
			Cycles    []CycleReport        `json:"cycles"`
			Undecided []Num                `json:"undecided"`
			Below     *[]ExceptionReport   `json:"below_from"`
			Audit     *Audit               `json:"audit,omitempty"`
			Shard     *SpanReport          `json:"shard,omitempty"`
			Span      *SpanReport          `json:"span,omitempty"`
			BytesRead int64                `json:"bytes_read,omitempty"`
			words
			failure
		}{c, r.SieveRoot, r.From, r.To, r.K, r.BlockExp, r.Cap, r.Ceiling, r.Chunks, r.Counts, st,
			orEmpty(r.Cycles), orEmpty(r.Undecided), r.Below, r.Audit, r.Shard, r.Span, r.BytesRead, w, f})
	}
	return marshal(struct {
		common
		K          int               `json:"k,omitempty"`
		J          int               `json:"j,omitempty"`
		Cap        uint32            `json:"cap,omitempty"`
		Ceiling    int               `json:"ceiling,omitempty"`
		Chunks     int               `json:"chunks,omitempty"`
		Survivors  Num               `json:"survivors,omitempty"`
		Joined     Num               `json:"joined,omitempty"`
		Before     Num               `json:"sieve_survivors,omitempty"`
		ClosedAt   stepCounts        `json:"closed_at,omitempty"`
		Exceptions []ExceptionReport `json:"exceptions"`
		Shard      *SpanReport       `json:"shard,omitempty"`
		Span       *SpanReport       `json:"span,omitempty"`
		BytesRead  int64             `json:"bytes_read,omitempty"`
		words
		failure
	}{c, r.K, r.J, r.Cap, r.Ceiling, r.Chunks, r.Survivors, r.Joined, r.SieveSurvivors, stepCounts(r.ClosedAt), orEmpty(r.Exceptions), r.Shard, r.Span, r.BytesRead, w, f})
}

// marshal writes JSON without escaping <, > and &, which the claims use
// as comparisons.
func marshal(v any) ([]byte, error) {
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		return nil, err
	}
	return bytes.TrimSuffix(b.Bytes(), []byte("\n")), nil
}

func orEmpty[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}

// reportOf puts a checker's result into a report: the header's fields as
// far as it was read, what was re-derived, and the failure, if any.
func reportOf(res *kernel.Result, file string) *Report {
	v := Version()
	r := &Report{File: file, Mode: res.Mode, Checker: &v}
	if f := res.File; f != nil && f.Sieve != nil {
		describeSieve(r, f.Sieve, f.Records)
	} else if f != nil && f.Range != nil {
		describeRange(r, f.Range, f.Records)
	}
	if f := res.File; f != nil && f.Shard != nil {
		s := f.Shard
		r.Kind += " shard"
		r.Shard = &SpanReport{Index: s.Index, Of: s.Of, First: s.First, Count: s.Count}
	}
	if res.Root != nil {
		r.Root = res.Root.String()
	}
	if s := res.Span; s != nil {
		r.Span = &SpanReport{Index: s.Index, Of: s.Of, First: s.First, Count: s.Count}
	}
	if r.Mode == ModePart && res.File != nil {
		r.BytesRead = res.File.BytesRead()
	}
	for _, n := range res.Undecided {
		r.Undecided = append(r.Undecided, Num(n.String()))
	}
	if a := res.Audit; a != nil {
		r.Audit = audit(a.Blocks, len(a.Drawn))
		r.Audit.Seed, r.Audit.SeedFrom, r.Audit.Drawn = a.Seed, a.SeedFrom, a.Drawn
	}
	if res.Failure != nil {
		return r.fail(res.Failure)
	}
	if r.Kind == "range" || r.Kind == "range shard" {
		h := res.File.Range
		r.Below = belowReport(check.FatesBelow(h.Map, h.Cap, h.Ceiling, h.Lo))
	}
	r.Valid = true
	r.Partial = r.Span != nil || r.Audit != nil || r.Shard != nil
	return r
}

func describeSieve(r *Report, h *kernel.SieveHeader, records int) {
	r.Kind, r.Map, r.K, r.J, r.Cap, r.Chunks, r.Ceiling = "sieve", h.Map.String(), h.K, h.J, h.Cap, records, h.Ceiling
	r.Survivors = numU(h.Survivors)
	if h.Joins {
		r.Joined, r.SieveSurvivors = numU(h.Joined), numU(h.Survivors)
		r.Survivors = numU(h.Survivors - h.Joined)
	}
	r.ClosedAt = map[string]Num{}
	for t, c := range h.ClosedAt {
		if c != 0 {
			r.ClosedAt[strconv.Itoa(t+1)] = numU(c)
		}
	}
	r.Exceptions = []ExceptionReport{}
	for _, e := range h.Exceptions {
		r.Exceptions = append(r.Exceptions, exceptionReport(e))
	}
}

func exceptionReport(e kernel.Fate) ExceptionReport {
	x := ExceptionReport{N: Num(e.N.String()), Fate: [...]string{"", "descends", "cycle", "undecided"}[e.Kind], Steps: e.Steps}
	if e.Kind == kernel.Cycle {
		x.CycleMin = Num(e.CycleMin.String())
	}
	return x
}

func describeRange(r *Report, h *kernel.RangeHeader, records int) {
	r.Kind, r.Map, r.K, r.Cap, r.Chunks, r.Ceiling = "range", h.Map.String(), h.K, h.Cap, records, h.Ceiling
	r.SieveRoot, r.From, r.To, r.BlockExp = h.SieveRoot.String(), Num(h.Lo.String()), Num(h.Hi.String()), h.E
	t := &h.Totals
	n := func(i int) Num { return Num(t.Counts[i].String()) }
	r.Counts = &RangeCounts{Sieve: n(kernel.CSieve), Join: n(kernel.CJoin), Search: n(kernel.CSearch), Small: n(kernel.CSmall),
		Cycle: n(kernel.CCycle), Undecided: n(kernel.CUndecided), StoppingTimeSum: Num(t.Sum.String()), Rules: []RuleReport{}}
	for i, x := range h.Rules {
		rr := RuleReport{Class: fmt.Sprintf("%d*q+%d", x.M, x.C), Predecessor: fmt.Sprintf("%d*q+%d", x.Mp, x.Cp), Steps: x.Steps, Numbers: "0"}
		if i < len(t.Rules) {
			rr.Numbers = Num(t.Rules[i].String())
		}
		r.Counts.Rules = append(r.Counts.Rules, rr)
	}
	r.Records = []RecordReport{}
	for _, p := range t.Records {
		r.Records = append(r.Records, RecordReport{N: Num(p.N.String()), StoppingTime: p.Sigma})
	}
	if t.MaxAt != nil {
		r.MaxStoppingTime = &RecordReport{N: Num(t.MaxAt.String()), StoppingTime: t.MaxSigma}
	}
	r.Cycles = []CycleReport{}
	for _, c := range t.Cycles {
		r.Cycles = append(r.Cycles, CycleReport{Min: Num(c.Min.String()), Count: Num(c.Count.String())})
	}
	r.Undecided = []Num{}
}

// audit states what a sample of n of m blocks shows: the chance that it
// passes although a given share of the blocks is wrong, drawing without
// replacement.
func audit(m, n int) *Audit {
	a := &Audit{Blocks: m, Audited: n}
	for _, share := range []float64{0.001, 0.01, 0.1} {
		wrong := int(share*float64(m) + 0.999999)
		if k := len(a.PassIfWrong); k > 0 && a.PassIfWrong[k-1].WrongBlocks == wrong {
			continue // the same number of blocks as the smaller share
		}
		p := 1.0
		for i := 0; i < n; i++ {
			if m-wrong-i <= 0 {
				p = 0
				break
			}
			p *= float64(m-wrong-i) / float64(m-i)
		}
		a.PassIfWrong = append(a.PassIfWrong, PassChance{Share: share, WrongBlocks: wrong, Pass: p})
	}
	return a
}

// belowReport is what the numbers below a range reach, nil if not derived.
func belowReport(fates []kernel.Fate) *[]ExceptionReport {
	if fates == nil {
		return nil
	}
	out := []ExceptionReport{}
	for _, e := range fates {
		out = append(out, exceptionReport(e))
	}
	return &out
}

// SpanReport says which records a partial check re-derived, numbered as
// in the whole.
type SpanReport struct {
	Index int `json:"index"`
	Of    int `json:"of"`
	First int `json:"first"`
	Count int `json:"count"`
}
