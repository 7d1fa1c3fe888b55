package archive

import (
	"fmt"
	"io"
	"regexp"
)

// Subject is a certificate handed to a CheckFunc.
type Subject struct {
	Name string      // the file as the user knows it, for messages
	R    io.ReaderAt // the certificate's bytes: the copy the archive stores
	Size int64
	// Sample, if above 0, asks for an audit of that many blocks of a
	// range instead of a full check (what -sample means for check).
	Sample int
	// Sieve finds the file of a sieve certificate by its root, for a
	// range that rests on one; it returns a *SieveMissingError if the
	// archive (or the files being added with it) has none.
	Sieve func(root string) (path string, err error)
}

// CheckFunc checks one certificate and says what it proves. Its error
// wraps ErrInvalid for a certificate that is wrong, ErrMalformed for a
// file that is no certificate the archive takes (or cannot be read), and
// is a *SieveMissingError when Sieve found nothing.
type CheckFunc func(Subject) (Verdict, error)

// Verdict is what a check established about a certificate.
type Verdict struct {
	Root      string // 64 lowercase hex digits
	Kind      string // "sieve" or "range"
	Map       string // "3n+1"
	K, J      int    // 0 where they do not apply (J: sieves only)
	Lo, Hi    string // a range's [Lo, Hi) in decimal; "" for a sieve
	SieveRoot string // the sieve a range rests on; "" for a sieve
	Claim     string // the claim in one line
	// Audit is "" for a full check, and otherwise says what was checked
	// ("audit of 4 of 256 blocks, seed ...").
	Audit string
}

// SieveMissingError: a range rests on a sieve the lookup cannot find.
type SieveMissingError struct{ Root string }

func (e *SieveMissingError) Error() string {
	return fmt.Sprintf("it rests on the sieve certificate %s, which is not in the archive", e.Root)
}

var (
	hexRoot  = regexp.MustCompile(`^[0-9a-f]{64}$`)
	decimal  = regexp.MustCompile(`^[1-9][0-9]*$`)
	kindName = regexp.MustCompile(`^[a-z]+$`)
)

// IsRoot reports whether s is a root as the archive files it.
func IsRoot(s string) bool { return hexRoot.MatchString(s) }

// Kinds are the kinds of certificate an archive holds.
var Kinds = []string{"sieve", "range"}

func knownKind(k string) bool {
	for _, x := range Kinds {
		if x == k {
			return true
		}
	}
	return false
}

// sane rejects a verdict the index could not hold faithfully: a broken
// CheckFunc must not write nonsense into the index.
func (v *Verdict) sane() error {
	switch {
	case !IsRoot(v.Root):
		return fmt.Errorf("the checker gave the root %q", v.Root)
	case !kindName.MatchString(v.Kind) || !knownKind(v.Kind):
		return fmt.Errorf("the checker gave the kind %q, not one of %v", v.Kind, Kinds)
	case v.Map == "" || v.Claim == "":
		return fmt.Errorf("the checker gave no map or no claim")
	case (v.Lo == "") != (v.Hi == ""):
		return fmt.Errorf("the checker gave one bound of a range without the other")
	case v.Lo != "" && (!decimal.MatchString(v.Lo) || !decimal.MatchString(v.Hi) || numKey(v.Lo) >= numKey(v.Hi)):
		return fmt.Errorf("the checker gave the bounds [%s, %s)", v.Lo, v.Hi)
	case v.SieveRoot != "" && !IsRoot(v.SieveRoot):
		return fmt.Errorf("the checker gave the sieve root %q", v.SieveRoot)
	}
	return nil
}

// numKey writes a positive decimal so that keys compare as the numbers
// do: its length in four digits (a natural has at most 255 bytes, 615
// digits), a colon, the digits. SQL writes the same key as
// printf('%04d:%s', length(n), n).
func numKey(dec string) string { return fmt.Sprintf("%04d:%s", len(dec), dec) }

// bounds is how a verdict's numbers are written in messages.
func (v *Verdict) bounds() string {
	switch {
	case v.Lo != "":
		return fmt.Sprintf("[%s, %s)", v.Lo, v.Hi)
	case v.J != 0:
		return fmt.Sprintf("k = %d, j = %d", v.K, v.J)
	}
	return fmt.Sprintf("k = %d", v.K)
}

// Describe is the verdict in a few words: kind, map and bounds.
func (v *Verdict) Describe() string { return v.Kind + " " + v.Map + " " + v.bounds() }
