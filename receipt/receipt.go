// Package receipt owns the signed receipt of a check: a short text that
// says which certificate was checked, how, by which checker, with what
// result, and when, signed with an Ed25519 key in the signed-note format
// of golang.org/x/mod/sumdb/note.
//
// # Receipt text
//
// The text is lines of the form "key value", each ending in a newline, in
// exactly this order; a line marked optional is present or absent as the
// certificate calls for. Values are printable UTF-8 (no control
// characters, no tab) and never empty. Anything else is malformed: a
// receipt has one encoding, and Parse re-encodes what it read and compares.
//
//	descent check receipt 1        the first line, alone; another version is another first line
//	root ROOT                      the certificate's root, 64 lowercase hex digits
//	kind KIND                      sieve, range
//	map MAP                        3n+1, 5n+1, ...
//	k K                            optional: the modulus exponent of the sieve (a range's sieve)
//	j J                            optional: a sieve's step budget
//	from LO                        optional: a range's [LO, HI), decimal
//	to HI                          optional, with from
//	sieve ROOT                     optional: the sieve certificate a range rests on
//	claim TEXT                     the claim in one line, as 'descent check' prints it; as the
//	                               header states it, re-derived as far as mode and result say
//	checker TEXT                   the checking program's module path and version, and the VCS
//	                               revision it was built from where known
//	mode MODE                      what was re-derived (below)
//	result RESULT                  valid, passed, or invalid REASON (below)
//	time TIME                      when, RFC 3339 in UTC to the second: 2026-01-02T15:04:05Z
//
// MODE is "full", or one to three of these, in this order, joined by ", ":
// "shard I/N" (share I of N of the records), "part P" (record P, or share
// I/N, checked against a published root through its audit path), and
// "audit S of B blocks, seed Q" (S blocks of B drawn from the root and the
// seed; Q is the seed as a Go string literal, so that any seed fits).
//
// RESULT is "valid" when the whole certificate was re-derived and holds,
// "passed" when what the mode names was re-derived and holds (the rest was
// not), and "invalid REASON" when the check found the certificate wrong,
// REASON being the checker's failure code (hash, count, block, ...). A
// check that could not read the certificate gives no receipt.
//
// # Example
//
// The receipt of a full check of testdata/sieve-3n+1-k10.dcert, signed
// with the example key alice+ac9ab061+ATmSJIbpvQPLRBQJtiGgNwqu3yIEqdlYHtpVNEOi4hMq,
// whose secret half is the 32 bytes "descent receipt example key 0001"
// (for this example only; a test signs it again and compares):
//
//	descent check receipt 1
//	root 2753cfddc627705cda8b3df4e9fe36c9909fe341a571d6ed619a3bfd7b11c2cb
//	kind sieve
//	map 3n+1
//	k 10
//	j 10
//	claim 3n+1: 64 of the 2^10 residues survive 10 steps; the rest lie in 27 closing classes; 1 exception (n = 1 lies on a cycle, as its smallest member)
//	checker descent v1.2.0 rev 8320ebb9c1d2e3f4a5b6c7d8e9f0a1b2c3d4e5f6
//	mode full
//	result valid
//	time 2026-12-01T12:00:00Z
//
//	— alice rJqwYaxTHURxPhtyxRZTxGlTRvgEdbwaI5kzW0GzPYAAYoQrk2MmcVv5cVoINi8wMJEB0eWkFDy34vJVGHlqlQ4eZwA=
//
// The signature lines follow a blank line, as the note format has them:
// an em dash, the key's name, and the base64 of the key's 32-bit hash and
// the Ed25519 signature of the text above the blank line.
package receipt

import (
	"errors"
	"fmt"
	"regexp"
	"strconv"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"
)

// Header is the first line of a receipt of this version.
const Header = "descent check receipt 1"

// MaxSize bounds a receipt: the claim line is the only long one.
const MaxSize = 64 << 10

// ErrMalformed is wrapped by every error about a receipt or key that does
// not follow its format.
var ErrMalformed = errors.New("malformed")

// Receipt is the text of a receipt.
type Receipt struct {
	Root     string
	Kind     string
	Map      string
	K, J     int    // 0: absent
	From, To string // "": absent
	Sieve    string // "": absent
	Claim    string
	Checker  string
	Mode     Mode
	Result   Result
	Time     time.Time
}

// Mode is what a check re-derived; the zero Mode is a full check.
type Mode struct {
	Shard *Share // a share of the records
	Part  string // a part checked against a published root: "P" or "I/N"
	Audit *Audit
}

// Share is share I of N.
type Share struct{ I, N int }

// Audit is a sample of S of B blocks drawn with Seed.
type Audit struct {
	Drawn, Blocks int
	Seed          string
}

// Result is the outcome of a check.
type Result struct {
	Valid  bool   // the check found no fault in what it re-derived
	Reason string // the failure code when not Valid
}

var (
	rootRE   = regexp.MustCompile(`^[0-9a-f]{64}$`)
	decRE    = regexp.MustCompile(`^[1-9][0-9]*$`)
	kindRE   = regexp.MustCompile(`^[a-z]+$`)
	reasonRE = regexp.MustCompile(`^[a-z][a-z-]*$`)
	partRE   = regexp.MustCompile(`^(0|[1-9][0-9]*)(/[1-9][0-9]*)?$`)
	shareRE  = regexp.MustCompile(`^(0|[1-9][0-9]*)/([1-9][0-9]*)$`)
)

// printable: a value must survive a line-oriented text signed as a note.
func printable(s string) bool {
	if s == "" || !utf8.ValidString(s) || strings.TrimSpace(s) != s {
		return false
	}
	for _, r := range s {
		if unicode.IsControl(r) || !unicode.IsPrint(r) && r != ' ' {
			return false
		}
	}
	return true
}

// full reports whether the mode re-derives the whole certificate.
func (m Mode) full() bool { return m.Shard == nil && m.Part == "" && m.Audit == nil }

func (m Mode) String() string {
	if m.full() {
		return "full"
	}
	var parts []string
	if m.Shard != nil {
		parts = append(parts, fmt.Sprintf("shard %d/%d", m.Shard.I, m.Shard.N))
	}
	if m.Part != "" {
		parts = append(parts, "part "+m.Part)
	}
	if a := m.Audit; a != nil {
		parts = append(parts, fmt.Sprintf("audit %d of %d blocks, seed %s", a.Drawn, a.Blocks, strconv.Quote(a.Seed)))
	}
	return strings.Join(parts, ", ")
}

func parseMode(s string) (Mode, error) {
	var m Mode
	if s == "full" {
		return m, nil
	}
	rest := s
	take := func(prefix string) (string, bool) {
		if !strings.HasPrefix(rest, prefix) {
			return "", false
		}
		v, after, _ := strings.Cut(rest[len(prefix):], ", ")
		rest = after
		return v, true
	}
	if v, ok := take("shard "); ok {
		sub := shareRE.FindStringSubmatch(v)
		if sub == nil {
			return m, fmt.Errorf("mode: shard %q: want I/N", v)
		}
		i, _ := strconv.Atoi(sub[1])
		n, _ := strconv.Atoi(sub[2])
		m.Shard = &Share{I: i, N: n}
	}
	if v, ok := take("part "); ok {
		m.Part = v
	}
	if strings.HasPrefix(rest, "audit ") {
		var a Audit
		var q string
		if _, err := fmt.Sscanf(rest, "audit %d of %d blocks, seed %s", &a.Drawn, &a.Blocks, &q); err != nil {
			return m, fmt.Errorf("mode: %q: want audit S of B blocks, seed \"...\"", rest)
		}
		_, quoted, _ := strings.Cut(rest, ", seed ")
		seed, err := strconv.Unquote(quoted)
		if err != nil {
			return m, fmt.Errorf("mode: the seed %s is not a Go string literal", quoted)
		}
		a.Seed, rest = seed, ""
		m.Audit = &a
	}
	if rest != "" || m.full() {
		return m, fmt.Errorf("mode %q: want full, or shard I/N, part P, audit S of B blocks, seed Q, in that order", s)
	}
	return m, m.sane()
}

func (m Mode) sane() error {
	switch {
	case m.Shard != nil && (m.Shard.I < 0 || m.Shard.I >= m.Shard.N):
		return fmt.Errorf("mode: shard %d/%d: want 0 <= I < N", m.Shard.I, m.Shard.N)
	case m.Part != "" && !partRE.MatchString(m.Part):
		return fmt.Errorf("mode: part %q: want P or I/N", m.Part)
	case m.Audit != nil && (m.Audit.Drawn < 1 || m.Audit.Blocks < m.Audit.Drawn):
		return fmt.Errorf("mode: audit %d of %d blocks: want 1 <= S <= B", m.Audit.Drawn, m.Audit.Blocks)
	case m.Audit != nil && !utf8.ValidString(m.Audit.Seed):
		return fmt.Errorf("mode: the seed is not UTF-8")
	}
	return nil
}

func (r Result) String() string {
	if !r.Valid {
		return "invalid " + r.Reason
	}
	return "valid"
}

// Outcome is the result line's value: a check of less than the whole
// says "passed", never "valid".
func (r *Receipt) Outcome() string {
	if r.Result.Valid && !r.Mode.full() {
		return "passed"
	}
	return r.Result.String()
}

func parseResult(s string, m Mode) (Result, error) {
	switch {
	case s == "valid" && m.full(), s == "passed" && !m.full():
		return Result{Valid: true}, nil
	case strings.HasPrefix(s, "invalid ") && reasonRE.MatchString(s[len("invalid "):]):
		return Result{Reason: s[len("invalid "):]}, nil
	}
	return Result{}, fmt.Errorf("result %q: want valid (a full check), passed (a partial one) or invalid REASON", s)
}

// sane checks the fields a receipt must have, and their forms.
func (r *Receipt) sane() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s", ErrMalformed, fmt.Sprintf(format, args...))
	}
	switch {
	case !rootRE.MatchString(r.Root):
		return bad("root %q: want 64 lowercase hex digits", r.Root)
	case !kindRE.MatchString(r.Kind):
		return bad("kind %q", r.Kind)
	case !printable(r.Map) || strings.Contains(r.Map, " "):
		return bad("map %q", r.Map)
	case r.K < 0 || r.K > 64 || r.J < 0 || r.J > 64:
		return bad("k %d, j %d: want 1 to 64", r.K, r.J)
	case (r.From == "") != (r.To == ""):
		return bad("from and to go together")
	case r.From != "" && (!decRE.MatchString(r.From) || !decRE.MatchString(r.To)):
		return bad("from %q, to %q: want positive decimals", r.From, r.To)
	case r.Sieve != "" && !rootRE.MatchString(r.Sieve):
		return bad("sieve %q: want 64 lowercase hex digits", r.Sieve)
	case !printable(r.Claim):
		return bad("claim: want one line of printable text")
	case !printable(r.Checker):
		return bad("checker: want one line of printable text")
	case !r.Result.Valid && !reasonRE.MatchString(r.Result.Reason):
		return bad("result: reason %q", r.Result.Reason)
	case r.Time.IsZero() || r.Time.Year() > 9999:
		return bad("time %v", r.Time)
	}
	if err := r.Mode.sane(); err != nil {
		return fmt.Errorf("%w: %v", ErrMalformed, err)
	}
	return nil
}

// Text is the receipt's text, the part that is signed.
func (r *Receipt) Text() (string, error) {
	if err := r.sane(); err != nil {
		return "", err
	}
	var b strings.Builder
	line := func(k, v string) { b.WriteString(k + " " + v + "\n") }
	b.WriteString(Header + "\n")
	line("root", r.Root)
	line("kind", r.Kind)
	line("map", r.Map)
	if r.K != 0 {
		line("k", strconv.Itoa(r.K))
	}
	if r.J != 0 {
		line("j", strconv.Itoa(r.J))
	}
	if r.From != "" {
		line("from", r.From)
		line("to", r.To)
	}
	if r.Sieve != "" {
		line("sieve", r.Sieve)
	}
	line("claim", r.Claim)
	line("checker", r.Checker)
	line("mode", r.Mode.String())
	line("result", r.Outcome())
	line("time", r.Time.UTC().Truncate(time.Second).Format(time.RFC3339))
	return b.String(), nil
}

// keys in the order of the text; optional ones may be absent.
var keys = []struct {
	name     string
	optional bool
}{
	{"root", false}, {"kind", false}, {"map", false}, {"k", true}, {"j", true},
	{"from", true}, {"to", true}, {"sieve", true}, {"claim", false}, {"checker", false},
	{"mode", false}, {"result", false}, {"time", false},
}

// Parse reads a receipt's text (without signatures).
func Parse(text string) (*Receipt, error) {
	bad := func(format string, args ...any) (*Receipt, error) {
		return nil, fmt.Errorf("%w: %s", ErrMalformed, fmt.Sprintf(format, args...))
	}
	if len(text) > MaxSize {
		return bad("%d bytes, more than a receipt has (%d)", len(text), MaxSize)
	}
	body, ok := strings.CutSuffix(text, "\n")
	if !ok {
		return bad("the text does not end in a newline")
	}
	lines := strings.Split(body, "\n")
	if lines[0] != Header {
		return bad("line 1 is %q, not %q", lines[0], Header)
	}
	vals := map[string]string{}
	i := 1
	for _, k := range keys {
		if i < len(lines) {
			key, val, _ := strings.Cut(lines[i], " ")
			if key == k.name {
				vals[k.name] = val
				i++
				continue
			}
		}
		if !k.optional {
			return bad("line %d: want %q", i+1, k.name+" ...")
		}
	}
	if i < len(lines) {
		return bad("line %d: %q is out of place or unknown", i+1, lines[i])
	}
	r := &Receipt{Root: vals["root"], Kind: vals["kind"], Map: vals["map"], From: vals["from"], To: vals["to"],
		Sieve: vals["sieve"], Claim: vals["claim"], Checker: vals["checker"]}
	for _, f := range []struct {
		key string
		dst *int
	}{{"k", &r.K}, {"j", &r.J}} {
		if v, ok := vals[f.key]; ok {
			n, err := strconv.Atoi(v)
			if err != nil || !decRE.MatchString(v) {
				return bad("%s %q: want a number", f.key, v)
			}
			*f.dst = n
		}
	}
	var err error
	if r.Mode, err = parseMode(vals["mode"]); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrMalformed, err)
	}
	if r.Result, err = parseResult(vals["result"], r.Mode); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrMalformed, err)
	}
	if r.Time, err = time.Parse(time.RFC3339, vals["time"]); err != nil {
		return bad("time %q: want RFC 3339 in UTC", vals["time"])
	}
	again, err := r.Text()
	if err != nil {
		return nil, err
	}
	if again != text {
		return bad("not in canonical form (a value with extra spaces, a leading zero, or a time not in UTC)")
	}
	return r, nil
}
