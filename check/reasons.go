package check

import (
	"errors"
	"fmt"
)

// The classes of failure. Callers branch on them with errors.Is; each
// reason below belongs to exactly one (SPEC.md, section 3, "Failures").
var (
	// ErrMalformed: the bytes do not follow the format (exit 2).
	ErrMalformed = errors.New("malformed")
	// ErrInvalid: a certificate whose hashes or claims are wrong (exit 1).
	ErrInvalid = errors.New("invalid")
	// ErrLimits: the certificate asks for more work than the reader's
	// budget (SPEC.md, "Work"); neither shown valid nor invalid (exit 2).
	ErrLimits = errors.New("beyond limits")
	// ErrUsage: the reader's own mistake, such as a range checked without
	// its sieve or with another one (exit 2).
	ErrUsage = errors.New("usage")
)

// The reasons a check fails, as Failure.Reason and the JSON "reason".
const (
	ReasonUnreadable    = "unreadable"     // usage: the file cannot be opened or read
	ReasonVersion       = "version"        // malformed: a format version this checker does not read
	ReasonMalformed     = "malformed"      // malformed: the bytes do not follow the format
	ReasonLimits        = "limits"         // limits: the work bound is over the budget
	ReasonSieveMissing  = "sieve-missing"  // usage: a range checked without its sieve
	ReasonSieveMismatch = "sieve-mismatch" // usage: the sieve given is not the one the range names
	ReasonPart          = "part"           // usage: -part names no record of the certificate
	ReasonHash          = "hash"           // invalid: a record or the header does not match its leaf
	ReasonTree          = "tree"           // invalid: a stored inner hash does not match its children
	ReasonRoot          = "root"           // invalid: the root is not the expected one
	ReasonAudit         = "audit"          // invalid: a part with its audit path does not lead to the root
	ReasonChunkSpan     = "chunk-span"     // invalid: a chunk spans other depths than j calls for
	ReasonChunkStart    = "chunk-start"    // invalid: a chunk starts at another class than its place calls for
	ReasonFalseClosing  = "false-closing"  // invalid: a class is claimed to close where it does not
	ReasonMissedClosing = "missed-closing" // invalid: a class that closes is claimed open
	ReasonCount         = "count"          // invalid: a count differs from what the claims add up to
	ReasonException     = "exception"      // invalid: an exception missing, invented, or of another fate
	ReasonJoin          = "join"           // invalid: a claimed join is false
	ReasonRule          = "rule"           // invalid: a predecessor rule is false
	ReasonSieve         = "sieve"          // invalid: the sieve a range names is invalid or does not fit it
	ReasonBlock         = "block"          // invalid: a block differs from its re-derivation
)

// Reason describes one failure reason: its class and when it is raised.
type Reason struct {
	Code  string
	Class error
	When  string
}

// Reasons lists every reason the checker can give, in the order of
// SPEC.md's table.
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

// ClassOf returns the class of a reason code, or nil for an unknown one.
func ClassOf(code string) error {
	for _, r := range Reasons {
		if r.Code == code {
			return r.Class
		}
	}
	return nil
}

func usageFail(reason, format string, args ...any) *Failure {
	return &Failure{Class: ErrUsage, Reason: reason, Msg: fmt.Sprintf(format, args...)}
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
