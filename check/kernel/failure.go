package kernel

import (
	"errors"
	"fmt"
	"strings"
)

// The classes of failure (SPEC.md, section 3, "Failures"): callers branch
// on them with errors.Is; each reason belongs to exactly one.
var (
	ErrMalformed = errors.New("malformed")     // the bytes break the format (exit 2)
	ErrInvalid   = errors.New("invalid")       // a hash or a claim is wrong (exit 1)
	ErrLimits    = errors.New("beyond limits") // the work bound exceeds the budget (exit 2)
	ErrUsage     = errors.New("usage")         // the reader's own mistake (exit 2)
)

// The reasons, as Failure.Reason; Reasons gives their classes.
const (
	ReasonUnreadable, ReasonVersion, ReasonMalformed                 = "unreadable", "version", "malformed"
	ReasonSieveMissing, ReasonSieveMismatch, ReasonPart              = "sieve-missing", "sieve-mismatch", "part"
	ReasonHash, ReasonTree, ReasonRoot, ReasonAudit, ReasonLimits    = "hash", "tree", "root", "audit", "limits"
	ReasonSieve, ReasonRule, ReasonChunkSpan, ReasonChunkStart       = "sieve", "rule", "chunk-span", "chunk-start"
	ReasonFalseClosing, ReasonMissedClosing, ReasonJoin, ReasonCount = "false-closing", "missed-closing", "join", "count"
	ReasonException, ReasonBlock                                     = "exception", "block"
)

// Reason is a reason with its class.
type Reason struct {
	Code  string
	Class error
}

// Reasons lists every reason with its class, in the order of SPEC.md's table.
var Reasons = []Reason{{ReasonUnreadable, ErrUsage}, {ReasonVersion, ErrMalformed}, {ReasonMalformed, ErrMalformed},
	{ReasonSieveMissing, ErrUsage}, {ReasonSieveMismatch, ErrUsage}, {ReasonPart, ErrUsage}, {ReasonHash, ErrInvalid},
	{ReasonTree, ErrInvalid}, {ReasonRoot, ErrInvalid}, {ReasonAudit, ErrInvalid}, {ReasonLimits, ErrLimits},
	{ReasonSieve, ErrInvalid}, {ReasonRule, ErrInvalid}, {ReasonChunkSpan, ErrInvalid}, {ReasonChunkStart, ErrInvalid},
	{ReasonFalseClosing, ErrInvalid}, {ReasonMissedClosing, ErrInvalid}, {ReasonJoin, ErrInvalid}, {ReasonCount, ErrInvalid},
	{ReasonException, ErrInvalid}, {ReasonBlock, ErrInvalid}}

// LookupReason returns the listed reason with this code.
func LookupReason(code string) (Reason, bool) {
	for _, r := range Reasons {
		if r.Code == code {
			return r, true
		}
	}
	return Reason{}, false
}

// Failure is the first thing found wrong, with where it was found. For a
// block or totals unlike their re-derivation, Derived and Stated hold
// both, for the reader to name the fields that differ (cmd/descent does).
type Failure struct {
	Class           error // ErrMalformed, ErrInvalid, ErrLimits or ErrUsage
	Reason, Msg     string
	Hint            string // for the reader's own mistakes: what to do instead
	Where           Where
	Derived, Stated *Block
}

// Where locates a failure; zero fields are unknown or do not apply.
type Where struct {
	Offset                    *int64 // a byte offset in the file
	Chunk                     *int   // a record
	Residue                   string // the class Residue mod 2^Step
	Step                      int
	N, Claim, Expected, Found string
}

func (f *Failure) Unwrap() error { return f.Class }

func (f *Failure) Error() string {
	var at []string
	if w := f.Where; w.Chunk != nil {
		at = append(at, fmt.Sprintf("chunk %d", *w.Chunk))
	}
	if w := f.Where; w.Residue != "" {
		at = append(at, fmt.Sprintf("class %s mod 2^%d", w.Residue, w.Step))
	}
	if f.Where.N != "" {
		at = append(at, "n = "+f.Where.N)
	}
	if f.Where.Offset != nil {
		at = append(at, fmt.Sprintf("offset %d", *f.Where.Offset))
	}
	if len(at) == 0 {
		return f.Msg
	}
	return strings.Join(at, ", ") + ": " + f.Msg
}

func malformed(off int64, format string, args ...any) *Failure {
	return &Failure{Class: ErrMalformed, Reason: ReasonMalformed, Msg: fmt.Sprintf(format, args...), Where: Where{Offset: &off}}
}

func invalid(reason string, w Where, format string, args ...any) *Failure {
	return &Failure{Class: ErrInvalid, Reason: reason, Msg: fmt.Sprintf(format, args...), Where: w}
}

func usage(reason, hint, format string, args ...any) *Failure {
	return &Failure{Class: ErrUsage, Reason: reason, Hint: hint, Msg: fmt.Sprintf(format, args...)}
}

func at(i int) *int { return &i }
