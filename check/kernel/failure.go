package kernel

import (
	"errors"
	"fmt"
	"strings"
)

// The classes of failure (SPEC.md, section 3, "Failures"). Callers branch
// on them with errors.Is; each reason belongs to exactly one.
var (
	ErrMalformed = errors.New("malformed")     // the bytes break the format (exit 2)
	ErrInvalid   = errors.New("invalid")       // a hash or a claim is wrong (exit 1)
	ErrLimits    = errors.New("beyond limits") // the work bound exceeds the budget (exit 2)
	ErrUsage     = errors.New("usage")         // the reader's own mistake (exit 2)
)

// The reasons a check fails, as Failure.Reason.
const (
	ReasonUnreadable    = "unreadable"
	ReasonVersion       = "version"
	ReasonMalformed     = "malformed"
	ReasonSieveMissing  = "sieve-missing"
	ReasonSieveMismatch = "sieve-mismatch"
	ReasonPart          = "part"
	ReasonHash          = "hash"
	ReasonTree          = "tree"
	ReasonRoot          = "root"
	ReasonAudit         = "audit"
	ReasonLimits        = "limits"
	ReasonSieve         = "sieve"
	ReasonRule          = "rule"
	ReasonChunkSpan     = "chunk-span"
	ReasonChunkStart    = "chunk-start"
	ReasonFalseClosing  = "false-closing"
	ReasonMissedClosing = "missed-closing"
	ReasonJoin          = "join"
	ReasonCount         = "count"
	ReasonException     = "exception"
	ReasonBlock         = "block"
)

// Reason is one failure reason: its class and when it is raised.
type Reason struct {
	Code  string
	Class error
	When  string
}

// Reasons lists every reason, in the order of SPEC.md's table.
var Reasons = []Reason{
	{ReasonUnreadable, ErrUsage, "the file cannot be opened or read"},
	{ReasonVersion, ErrMalformed, "the file is of another format version (an older one: re-emit it)"},
	{ReasonMalformed, ErrMalformed, "the bytes do not follow the format"},
	{ReasonSieveMissing, ErrUsage, "a range certificate is checked without the sieve it rests on"},
	{ReasonSieveMismatch, ErrUsage, "the sieve file given is not the one the range names (another root)"},
	{ReasonPart, ErrUsage, "-part names no record of the certificate, or the file is a shard"},
	{ReasonHash, ErrInvalid, "a record or the header does not match its leaf hash"},
	{ReasonTree, ErrInvalid, "a stored inner hash does not match its children"},
	{ReasonRoot, ErrInvalid, "the root is not the one the reader expects"},
	{ReasonAudit, ErrInvalid, "the header or a record, with its audit path, does not lead to the given root"},
	{ReasonLimits, ErrLimits, "the certificate's work bound exceeds the reader's budget"},
	{ReasonSieve, ErrInvalid, "the sieve a range names is invalid, or of another map or k, or has j < k"},
	{ReasonRule, ErrInvalid, "a predecessor rule is false"},
	{ReasonChunkSpan, ErrInvalid, "a chunk spans other depths than the header's j calls for"},
	{ReasonChunkStart, ErrInvalid, "a chunk starts at another class than its place in the file calls for"},
	{ReasonFalseClosing, ErrInvalid, "a class is claimed to close at a step where it does not"},
	{ReasonMissedClosing, ErrInvalid, "a class that closes at a step is claimed to stay open"},
	{ReasonJoin, ErrInvalid, "a claimed join is false"},
	{ReasonCount, ErrInvalid, "a count in the header differs from what the claims add up to"},
	{ReasonException, ErrInvalid, "an exception is missing, invented, or has another fate"},
	{ReasonBlock, ErrInvalid, "a block of a range differs from its re-derivation"},
}

// LookupReason returns the listed reason with this code.
func LookupReason(code string) (Reason, bool) {
	for _, r := range Reasons {
		if r.Code == code {
			return r, true
		}
	}
	return Reason{}, false
}

// Failure is the first thing found wrong, with where it was found.
type Failure struct {
	Class  error  // ErrMalformed, ErrInvalid, ErrLimits or ErrUsage
	Reason string // one of Reasons
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

// Where locates a failure; zero fields are unknown or do not apply.
type Where struct {
	Offset   *int64 // a byte offset in the file
	Chunk    *int   // a record
	Residue  string // the class Residue mod 2^Step
	Step     int
	N        string
	Claim    string
	Expected string
	Found    string
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

func malformed(off int64, format string, args ...any) *Failure {
	return &Failure{Class: ErrMalformed, Reason: ReasonMalformed, Msg: fmt.Sprintf(format, args...), Where: Where{Offset: &off}}
}

func invalid(reason string, w Where, format string, args ...any) *Failure {
	return &Failure{Class: ErrInvalid, Reason: reason, Msg: fmt.Sprintf(format, args...), Where: w}
}

func usage(reason, hint, format string, args ...any) *Failure {
	return &Failure{Class: ErrUsage, Reason: reason, Hint: hint, Msg: fmt.Sprintf(format, args...)}
}

func chunkAt(i int) *int { return &i }
