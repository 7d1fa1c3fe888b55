package check

import (
	"encoding/json"
	"fmt"
	"strconv"
	"strings"
)

// Failure is the first thing found wrong, with where it was found.
type Failure struct {
	Class  error  // ErrMalformed, ErrInvalid, ErrLimits or ErrUsage
	Reason string // a stable code, listed in Reasons
	Msg    string
	Hint   string // for the reader's own mistakes: what to do instead
	Where  Where
}

func (f *Failure) Error() string {
	if loc := f.Where.String(); loc != "" {
		return loc + ": " + f.Msg
	}
	return f.Msg
}

func (f *Failure) Unwrap() error { return f.Class }

// Where locates a failure. Zero fields are unknown or do not apply.
type Where struct {
	Offset   *int64 `json:"offset,omitempty"` // a byte offset in the file
	Chunk    *int   `json:"chunk,omitempty"`
	Residue  string `json:"residue,omitempty"` // the class Residue mod 2^Step
	Step     int    `json:"step,omitempty"`
	N        string `json:"n,omitempty"`
	Claim    string `json:"claim,omitempty"`
	Expected string `json:"expected,omitempty"`
	Found    string `json:"found,omitempty"`
}

func (w Where) String() string {
	var parts []string
	if w.Chunk != nil {
		parts = append(parts, fmt.Sprintf("chunk %d", *w.Chunk))
	}
	if w.Residue != "" {
		parts = append(parts, fmt.Sprintf("class %s mod 2^%d", w.Residue, w.Step))
	}
	if w.N != "" {
		parts = append(parts, "n = "+w.N)
	}
	if w.Offset != nil {
		parts = append(parts, fmt.Sprintf("offset %d", *w.Offset))
	}
	return strings.Join(parts, ", ")
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
	Fate     string `json:"fate"` // descends, cycle or undecided
	Steps    uint32 `json:"steps,omitempty"`
	CycleMin Num    `json:"cycle_min,omitempty"`
}

// Report is the outcome of checking one certificate. The claim fields come
// from the header and are filled in as far as the header could be read;
// they are proven only when Valid is true.
type Report struct {
	// JSON keys are chosen per kind by MarshalJSON.
	File      string
	Valid     bool
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
	ClosedAt               map[string]Num
	Exceptions             []ExceptionReport
	// Range certificates.
	SieveRoot       string
	From            Num
	To              Num
	BlockExp        int
	Counts          *RangeCounts
	Records         []RecordReport
	MaxStoppingTime *RecordReport
	Cycles          []CycleReport
	Undecided       []Num
	Audit           *Audit
	Shard           *SpanReport // a shard file: which records of the whole it holds
	Span            *SpanReport // a share checked with Options.Span
	BytesRead       int64       // a part check: the bytes of the file it read
	Partial         bool        // only part of the claims were re-derived (-shard, -part, -sample)

	Reason string
	Error  string
	Hint   string // for the reader's own mistakes: what to do instead
	Where  *Where

	failure *Failure
}

// Err returns nil for a valid certificate and the failure otherwise.
func (r *Report) Err() error {
	if r.failure == nil {
		return nil
	}
	return r.failure
}

func (r *Report) fail(f *Failure) *Report {
	r.Valid, r.failure = false, f
	r.Reason, r.Error, r.Hint = f.Reason, f.Error(), f.Hint
	w := f.Where
	r.Where = &w
	return r
}

func malformed(off int64, format string, args ...any) *Failure {
	return &Failure{Class: ErrMalformed, Reason: ReasonMalformed, Msg: fmt.Sprintf(format, args...), Where: Where{Offset: &off}}
}

func invalid(reason string, w Where, format string, args ...any) *Failure {
	return &Failure{Class: ErrInvalid, Reason: reason, Msg: fmt.Sprintf(format, args...), Where: w}
}

// RangeCounts says how the numbers of a range are justified.
type RangeCounts struct {
	Sieve           Num `json:"sieve"`     // in a closing class: T^t(n) < n, t the stopping time
	Join            Num `json:"join"`      // in a joined class: meets n - delta after k steps
	Search          Num `json:"search"`    // in a survivor class, found to drop by iteration
	Small           Num `json:"small"`     // at most the small bound, found to drop by direct iteration
	Cycle           Num `json:"cycle"`     // reach a cycle without dropping
	Undecided       Num `json:"undecided"` // neither within the cap
	StoppingTimeSum Num `json:"stopping_time_sum"`
	// Rules: the numbers of survivor classes justified by each predecessor
	// rule instead of a search; they have no stopping time in the figures.
	Rules []RuleReport `json:"rules"`
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

// RecordReport is a number with its stopping time.
type RecordReport struct {
	N            Num    `json:"n"`
	StoppingTime uint32 `json:"stopping_time"`
}

// CycleReport is a cycle, by its smallest member, and how many numbers of
// the range reach it without dropping below themselves.
type CycleReport struct {
	Min   Num `json:"min"`
	Count Num `json:"count"`
}

// Audit describes a sampled check of a range.
type Audit struct {
	Blocks      int          `json:"blocks"`
	Audited     int          `json:"audited"`
	Seed        string       `json:"seed"` // the reader's seed (chosen at random if none was given): repeat the audit with it
	PassIfWrong []PassChance `json:"pass_if_wrong"`
}

// PassChance is the chance that the audit passes if Share of the blocks
// (WrongBlocks of them) were wrong.
type PassChance struct {
	Share       float64 `json:"share"`
	WrongBlocks int     `json:"wrong_blocks"`
	Pass        float64 `json:"pass"`
}

// MarshalJSON writes the keys of the report's kind: a sieve report always
// has exceptions, a range report always has records, cycles and undecided.
func (r *Report) MarshalJSON() ([]byte, error) {
	type common struct {
		File  string `json:"file,omitempty"`
		Valid bool   `json:"valid"`
		Kind  string `json:"kind,omitempty"`
		Root  string `json:"root,omitempty"`
		Map   string `json:"map,omitempty"`
	}
	type failure struct {
		Reason string `json:"reason,omitempty"`
		Error  string `json:"error,omitempty"`
		Hint   string `json:"hint,omitempty"`
		Where  *Where `json:"where,omitempty"`
	}
	c := common{r.File, r.Valid, r.Kind, r.Root, r.Map}
	f := failure{r.Reason, r.Error, r.Hint, r.Where}
	if r.Kind == "range" || r.Kind == "range shard" {
		return json.Marshal(struct {
			common
			SieveRoot       string         `json:"sieve_root"`
			From            Num            `json:"from"`
			To              Num            `json:"to"`
			K               int            `json:"k"`
			BlockExp        int            `json:"block_exponent"`
			Cap             uint32         `json:"cap"`
			Ceiling         int            `json:"ceiling"`
			Blocks          int            `json:"blocks"`
			Counts          *RangeCounts   `json:"counts"`
			Records         []RecordReport `json:"records"`
			MaxStoppingTime *RecordReport  `json:"max_stopping_time"`
			Cycles          []CycleReport  `json:"cycles"`
			Undecided       []Num          `json:"undecided"`
			Audit           *Audit         `json:"audit,omitempty"`
			Shard           *SpanReport    `json:"shard,omitempty"`
			Span            *SpanReport    `json:"span,omitempty"`
			BytesRead       int64          `json:"bytes_read,omitempty"`
			Partial         bool           `json:"partial,omitempty"`
			failure
		}{c, r.SieveRoot, r.From, r.To, r.K, r.BlockExp, r.Cap, r.Ceiling, r.Chunks, r.Counts, orEmpty(r.Records), r.MaxStoppingTime,
			orEmpty(r.Cycles), orEmpty(r.Undecided), r.Audit, r.Shard, r.Span, r.BytesRead, r.Partial, f})
	}
	return json.Marshal(struct {
		common
		K          int               `json:"k,omitempty"`
		J          int               `json:"j,omitempty"`
		Cap        uint32            `json:"cap,omitempty"`
		Ceiling    int               `json:"ceiling,omitempty"`
		Chunks     int               `json:"chunks,omitempty"`
		Survivors  Num               `json:"survivors,omitempty"`
		Joined     Num               `json:"joined,omitempty"`
		Before     Num               `json:"sieve_survivors,omitempty"`
		ClosedAt   map[string]Num    `json:"closed_at,omitempty"`
		Exceptions []ExceptionReport `json:"exceptions"`
		Shard      *SpanReport       `json:"shard,omitempty"`
		Span       *SpanReport       `json:"span,omitempty"`
		BytesRead  int64             `json:"bytes_read,omitempty"`
		Partial    bool              `json:"partial,omitempty"`
		failure
	}{c, r.K, r.J, r.Cap, r.Ceiling, r.Chunks, r.Survivors, r.Joined, r.SieveSurvivors, r.ClosedAt, orEmpty(r.Exceptions), r.Shard, r.Span, r.BytesRead, r.Partial, f})
}

func orEmpty[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
