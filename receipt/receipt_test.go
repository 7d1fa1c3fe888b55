package receipt

import (
	"bytes"
	"crypto/ed25519"
	"crypto/rand"
	"encoding/base64"
	"encoding/binary"
	"fmt"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
	"golang.org/x/mod/sumdb/note"
)

var when = time.Date(2026, 12, 1, 12, 0, 0, 0, time.UTC)

// Receipts of the kinds and modes check writes. The roots and claims are
// invented for these tests: the text format does not depend on them.
func examples() map[string]*Receipt {
	sieve := &Receipt{Root: strings.Repeat("ab", 32), Kind: "sieve", Map: "3n+1", K: 10, J: 10,
		Claim: "3n+1: 64 of the 2^10 residues survive 10 steps", Checker: "descent v1.2.3 rev 0123abcd",
		Result: Result{Valid: true}, Time: when}
	rng := &Receipt{Root: strings.Repeat("01", 32), Kind: "range", Map: "5n+1", K: 12, From: "1152921504606846976",
		To: "1152921539006585024", Sieve: strings.Repeat("fe", 32), Claim: "5n+1 over [2^60, 2^60+2^35): ...",
		Checker: "descent (devel)", Result: Result{Valid: true}, Time: when}
	audit := *rng
	audit.Mode = Mode{Audit: &Audit{Drawn: 4, Blocks: 4096, Seed: "a seed, with \"quotes\", commas\nand a newline"}}
	shard := *rng
	shard.Mode = Mode{Shard: &Share{I: 3, N: 16}, Audit: &Audit{Drawn: 2, Blocks: 256, Seed: "0f0e"}}
	part := *sieve
	part.Mode = Mode{Part: "1/4"}
	bad := *sieve
	bad.Result = Result{Reason: "closed-early"}
	return map[string]*Receipt{"sieve": sieve, "range": rng, "audit": &audit, "shard": &shard, "part": &part, "invalid": &bad}
}

func TestReceiptTextRoundTrip(t *testing.T) {
	for name, r := range examples() {
		text, err := r.Text()
		require.NoError(t, err, name)
		got, err := Parse(text)
		require.NoError(t, err, "%s:\n%s", name, text)
		require.Equal(t, r, got, name)
	}
	text, _ := examples()["audit"].Text()
	require.Contains(t, text, "\nmode audit 4 of 4096 blocks, seed \"a seed, with \\\"quotes\\\", commas\\nand a newline\"\n")
	require.Contains(t, text, "\nresult passed\n", "an audit is never called valid")
	text, _ = examples()["shard"].Text()
	require.Contains(t, text, "\nmode shard 3/16, audit 2 of 256 blocks, seed \"0f0e\"\n")
}

// The example of the package documentation, signed again with its key
// and compared line for line; the claim is check's for that certificate.
func TestReceiptDocExample(t *testing.T) {
	src, err := os.ReadFile("receipt.go")
	require.NoError(t, err)
	_, after, ok := strings.Cut(string(src), "(for this example only; a test signs it again and compares):\n//\n")
	require.True(t, ok)
	block, _, ok := strings.Cut(after, "\n//\n// The signature lines follow")
	require.True(t, ok)
	var doc strings.Builder
	for _, line := range strings.Split(block, "\n") {
		doc.WriteString(strings.TrimPrefix(strings.TrimPrefix(line, "//"), "\t") + "\n")
	}

	skey, vkey, err := NewKey(strings.NewReader("descent receipt example key 0001"), "alice")
	require.NoError(t, err)
	require.Equal(t, "alice+ac9ab061+ATmSJIbpvQPLRBQJtiGgNwqu3yIEqdlYHtpVNEOi4hMq", vkey)
	r := &Receipt{Root: "2753cfddc627705cda8b3df4e9fe36c9909fe341a571d6ed619a3bfd7b11c2cb", Kind: "sieve", Map: "3n+1", K: 10, J: 10,
		Claim:   "3n+1: 64 of the 2^10 residues survive 10 steps; the rest lie in 27 closing classes; 1 exception (n = 1 lies on a cycle, as its smallest member)",
		Checker: "descent v1.2.0 rev 8320ebb9c1d2e3f4a5b6c7d8e9f0a1b2c3d4e5f6", Result: Result{Valid: true}, Time: when}
	msg, err := Sign(r, skey)
	require.NoError(t, err)
	require.Equal(t, doc.String(), string(msg))
	got, err := Open([]byte(doc.String()), vkey)
	require.NoError(t, err)
	require.Equal(t, r, got)

	readme, err := os.ReadFile("../README.md")
	require.NoError(t, err)
	indented := strings.ReplaceAll("    "+strings.TrimSuffix(doc.String(), "\n"), "\n", "\n    ")
	indented = strings.ReplaceAll(indented, "\n    \n", "\n\n")
	require.True(t, strings.Contains(string(readme), indented+"\n"), "the README shows the example:\n%s", indented)
}

// Every text that is not the canonical encoding of a receipt is refused.
func TestReceiptParseRefusesNonCanonical(t *testing.T) {
	good, err := examples()["range"].Text()
	require.NoError(t, err)
	edits := map[string]func(string) string{
		"another version":  func(s string) string { return strings.Replace(s, "receipt 1", "receipt 2", 1) },
		"no final newline": func(s string) string { return strings.TrimSuffix(s, "\n") },
		"a line missing":   func(s string) string { return strings.Replace(s, "map 5n+1\n", "", 1) },
		"lines swapped": func(s string) string {
			return strings.Replace(s, "kind range\nmap 5n+1\n", "map 5n+1\nkind range\n", 1)
		},
		"a line twice":       func(s string) string { return strings.Replace(s, "map 5n+1\n", "map 5n+1\nmap 5n+1\n", 1) },
		"an unknown line":    func(s string) string { return strings.Replace(s, "mode full\n", "mode full\nsigner me\n", 1) },
		"a blank line":       func(s string) string { return strings.Replace(s, "mode full\n", "mode full\n\n", 1) },
		"a leading zero":     func(s string) string { return strings.Replace(s, "k 12\n", "k 012\n", 1) },
		"k out of range":     func(s string) string { return strings.Replace(s, "k 12\n", "k 65\n", 1) },
		"an upper-case root": func(s string) string { return strings.Replace(s, "root 0101", "root 0A01", 1) },
		"a short root":       func(s string) string { return strings.Replace(s, "root 0101", "root 01", 1) },
		"from without to":    func(s string) string { return strings.Replace(s, "to 1152921539006585024\n", "", 1) },
		"a trailing space":   func(s string) string { return strings.Replace(s, "map 5n+1\n", "map 5n+1 \n", 1) },
		"a tab":              func(s string) string { return strings.Replace(s, "claim 5n+1", "claim\t5n+1", 1) },
		"a partial check said valid": func(s string) string {
			return strings.Replace(s, "mode full\n", "mode shard 1/2\n", 1)
		},
		"a full check said passed": func(s string) string { return strings.Replace(s, "result valid", "result passed", 1) },
		"a shard past its end": func(s string) string {
			return strings.Replace(s, "mode full\nresult valid", "mode shard 2/2\nresult passed", 1)
		},
		"an unquoted seed": func(s string) string {
			return strings.Replace(s, "mode full\nresult valid", "mode audit 1 of 2 blocks, seed abc\nresult passed", 1)
		},
		"an invalid without reason": func(s string) string { return strings.Replace(s, "result valid", "result invalid ", 1) },
		"a local time":              func(s string) string { return strings.Replace(s, "12:00:00Z", "13:00:00+01:00", 1) },
		"fractional seconds":        func(s string) string { return strings.Replace(s, "12:00:00Z", "12:00:00.5Z", 1) },
		"an empty claim": func(s string) string {
			return strings.Replace(s, "claim 5n+1 over [2^60, 2^60+2^35): ...", "claim ", 1)
		},
	}
	for name, edit := range edits {
		text := edit(good)
		require.NotEqual(t, good, text, name)
		_, err := Parse(text)
		require.ErrorIs(t, err, ErrMalformed, "%s:\n%s", name, text)
	}
}

func newKey(t *testing.T, name string) (skey, vkey string) {
	t.Helper()
	skey, vkey, err := NewKey(rand.Reader, name)
	require.NoError(t, err)
	return skey, vkey
}

func TestReceiptSignAndOpen(t *testing.T) {
	skey, vkey := newKey(t, "alice")
	for name, r := range examples() {
		msg, err := Sign(r, skey)
		require.NoError(t, err)
		got, err := Open(msg, vkey)
		require.NoError(t, err, name)
		require.Equal(t, r, got, name)
	}
}

// The signature is Ed25519 over the text, as the note format specifies;
// crypto/ed25519 from the standard library checks it here on its own.
func TestReceiptSignatureIsEd25519OverTheText(t *testing.T) {
	skey, vkey := newKey(t, "alice")
	msg, err := Sign(examples()["range"], skey)
	require.NoError(t, err)
	text, sigs, ok := bytes.Cut(msg, []byte("\n\n"))
	require.True(t, ok)
	line := strings.TrimSuffix(string(sigs), "\n")
	require.True(t, strings.HasPrefix(line, "— alice "), line)
	sig, err := base64.StdEncoding.DecodeString(strings.TrimPrefix(line, "— alice "))
	require.NoError(t, err)
	parts := strings.SplitN(vkey, "+", 3)
	require.Len(t, parts, 3)
	pub, err := base64.StdEncoding.DecodeString(parts[2])
	require.NoError(t, err)
	require.Equal(t, byte(1), pub[0], "algorithm 1 is Ed25519")
	require.Equal(t, parts[1], fmt.Sprintf("%08x", binary.BigEndian.Uint32(sig)), "the signature starts with the key's hash")
	require.True(t, ed25519.Verify(pub[1:], append(text, '\n'), sig[4:]))
}

func TestReceiptOpenRefuses(t *testing.T) {
	skey, vkey := newKey(t, "alice")
	_, otherV := newKey(t, "bob")
	_, sameNameV := newKey(t, "alice") // another key with the same name
	msg, err := Sign(examples()["sieve"], skey)
	require.NoError(t, err)

	_, err = Open(msg, otherV)
	require.ErrorIs(t, err, ErrOtherKey)
	_, err = Open(msg, sameNameV)
	require.ErrorIs(t, err, ErrOtherKey)

	altered := bytes.Replace(msg, []byte("result valid"), []byte("result invalid count"), 1)
	_, err = Open(altered, vkey)
	require.ErrorIs(t, err, ErrBadSignature)

	_, err = Open([]byte("result valid\n"), vkey)
	require.ErrorIs(t, err, ErrMalformed)
	_, err = Open(msg, "not a key")
	require.ErrorIs(t, err, ErrMalformed)
	_, err = Open(msg, skey) // the secret key is no verifier key
	require.ErrorIs(t, err, ErrMalformed)

	// A receipt without its fields is not signed at all.
	_, err = Sign(&Receipt{}, skey)
	require.ErrorIs(t, err, ErrMalformed)

	// A well signed note that is no receipt is malformed, not valid.
	signer, err := note.NewSigner(skey)
	require.NoError(t, err)
	other, err := note.Sign(&note.Note{Text: "descent check receipt 1\nresult valid\n"}, signer)
	require.NoError(t, err)
	_, err = Open(other, vkey)
	require.ErrorIs(t, err, ErrMalformed)
}

// Every single-bit flip of a signed receipt is refused: none opens as a
// receipt, under any class.
func TestReceiptEveryBitFlipIsRefused(t *testing.T) {
	skey, vkey := newKey(t, "alice")
	msg, err := Sign(examples()["audit"], skey)
	require.NoError(t, err)
	for i := range len(msg) * 8 {
		b := bytes.Clone(msg)
		b[i/8] ^= 1 << (i % 8)
		if r, err := Open(b, vkey); err == nil {
			t.Fatalf("flipping bit %d of byte %d still opens:\n%s\n%+v", i%8, i/8, b, r)
		}
	}
}

func TestKeyFiles(t *testing.T) {
	skey, vkey := newKey(t, "alice")
	for _, k := range []string{skey, vkey} {
		got, err := ParseKey([]byte(k + "\n"))
		require.NoError(t, err)
		require.Equal(t, k, got)
	}
	for _, b := range []string{"", "\n", skey, skey + "\n\n", skey + "\r\n", " " + skey + "\n", strings.Repeat("x", MaxKeySize+1)} {
		_, err := ParseKey([]byte(b))
		require.ErrorIs(t, err, ErrMalformed, "%q", b)
	}
	id, err := SignerName(skey)
	require.NoError(t, err)
	vid, err := VerifierName(vkey)
	require.NoError(t, err)
	require.Equal(t, id, vid)
	require.True(t, strings.HasPrefix(id, "alice+"))
	for _, name := range []string{"", "a b", "a+b", "tab\there"} {
		_, _, err := NewKey(rand.Reader, name)
		require.Error(t, err, "%q", name)
	}
}

func FuzzReceiptParse(f *testing.F) {
	for _, r := range examples() {
		text, _ := r.Text()
		f.Add(text)
	}
	f.Fuzz(func(t *testing.T, text string) {
		r, err := Parse(text)
		if err != nil {
			return
		}
		again, err := r.Text()
		if err != nil || again != text {
			t.Fatalf("parsed but does not re-encode to the same text: %v\n%q\n%q", err, text, again)
		}
	})
}
