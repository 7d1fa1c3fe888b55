package receipt

import (
	"encoding/base64"
	"errors"
	"fmt"
	"io"
	"strings"
	"unicode"
	"unicode/utf8"

	"golang.org/x/mod/sumdb/note"
)

// Keys are the note package's encoded keys, one line each in their files:
// the signer key "PRIVATE+KEY+NAME+HASH+DATA" (NAME.key, secret) and the
// verifier key "NAME+HASH+DATA" (NAME.pub), where HASH is the key's 32-bit
// hash in hex and DATA the base64 of the algorithm byte (1, Ed25519) and
// the key.

// MaxKeySize bounds a key file; a key is about 100 bytes.
const MaxKeySize = 4 << 10

// The ways a signed receipt fails to open besides being malformed.
var (
	// ErrBadSignature: the key signed the receipt, but not this text: the
	// text (or the signature) was altered.
	ErrBadSignature = errors.New("altered after it was signed")
	// ErrOtherKey: no signature on the receipt is by the given key.
	ErrOtherKey = errors.New("not signed by the given key")
)

// ValidName reports whether name can name a key: non-empty UTF-8 without
// spaces or '+', as the note format requires.
func ValidName(name string) bool {
	return name != "" && utf8.ValidString(name) && !strings.ContainsFunc(name, unicode.IsSpace) && !strings.Contains(name, "+")
}

// NewKey makes an Ed25519 key pair named name from the random bytes of
// rand: the signer key, to keep secret, and the verifier key, to publish.
func NewKey(rand io.Reader, name string) (skey, vkey string, err error) {
	if !ValidName(name) {
		return "", "", fmt.Errorf("key name %q: want a name without spaces or '+'", name)
	}
	return note.GenerateKey(rand, name)
}

// ParseKey reads the contents of a key file: one key and a newline.
func ParseKey(b []byte) (string, error) {
	if len(b) > MaxKeySize {
		return "", fmt.Errorf("%w: %d bytes, more than a key file has", ErrMalformed, len(b))
	}
	k, ok := strings.CutSuffix(string(b), "\n")
	if !ok || k == "" || strings.ContainsAny(k, "\r\n \t") {
		return "", fmt.Errorf("%w: want one key on one line", ErrMalformed)
	}
	return k, nil
}

// Sign returns the receipt's text signed with the signer key skey.
func Sign(r *Receipt, skey string) ([]byte, error) {
	signer, err := note.NewSigner(skey)
	if err != nil {
		return nil, fmt.Errorf("%w: signer key: %v", ErrMalformed, err)
	}
	text, err := r.Text()
	if err != nil {
		return nil, err
	}
	return note.Sign(&note.Note{Text: text}, signer)
}

// VerifierName returns the name and hash of a verifier key, as a receipt's
// signature line names them.
func VerifierName(vkey string) (string, error) {
	v, err := note.NewVerifier(vkey)
	if err != nil {
		return "", fmt.Errorf("%w: verifier key: %v", ErrMalformed, err)
	}
	return fmt.Sprintf("%s+%08x", v.Name(), v.KeyHash()), nil
}

// Open checks that msg is a receipt signed by the verifier key vkey and
// returns its text. The error wraps ErrMalformed, ErrBadSignature or
// ErrOtherKey.
func Open(msg []byte, vkey string) (*Receipt, error) {
	if len(msg) > MaxSize {
		return nil, fmt.Errorf("%w: %d bytes, more than a receipt has (%d)", ErrMalformed, len(msg), MaxSize)
	}
	v, err := note.NewVerifier(vkey)
	if err != nil {
		return nil, fmt.Errorf("%w: verifier key: %v", ErrMalformed, err)
	}
	n, err := note.Open(msg, note.VerifierList(v))
	var bad *note.InvalidSignatureError
	var unverified *note.UnverifiedNoteError
	switch {
	case errors.As(err, &bad):
		return nil, fmt.Errorf("%w: the signature by %s+%08x does not match the text", ErrBadSignature, v.Name(), v.KeyHash())
	case errors.As(err, &unverified):
		var by []string
		for _, s := range unverified.Note.UnverifiedSigs {
			by = append(by, fmt.Sprintf("%s+%08x", s.Name, s.Hash))
		}
		return nil, fmt.Errorf("%w %s+%08x: it is signed by %s", ErrOtherKey, v.Name(), v.KeyHash(), strings.Join(by, ", "))
	case err != nil:
		return nil, fmt.Errorf("%w: not a signed note: %v", ErrMalformed, err)
	}
	for _, sig := range n.Sigs {
		// base64 decoding ignores the unused bits of the last character,
		// so one signature has several spellings; accept only the one.
		raw, _ := base64.StdEncoding.DecodeString(sig.Base64)
		if base64.StdEncoding.EncodeToString(raw) != sig.Base64 {
			return nil, fmt.Errorf("%w: the signature by %s+%08x is not in canonical base64", ErrMalformed, sig.Name, sig.Hash)
		}
	}
	return Parse(n.Text)
}

// SignerName returns the name and hash of a signer key, as the receipts
// it signs name it, or an error wrapping ErrMalformed.
func SignerName(skey string) (string, error) {
	s, err := note.NewSigner(skey)
	if err != nil {
		return "", fmt.Errorf("%w: signer key: %v", ErrMalformed, err)
	}
	return fmt.Sprintf("%s+%08x", s.Name(), s.KeyHash()), nil
}
