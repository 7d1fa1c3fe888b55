package check

import (
	"crypto/rand"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"strconv"
	"strings"

	"golang.org/x/crypto/blake2b"

	"descent/check/kernel"
)

// The choices a reader makes about what to re-derive, kept out of the
// kernel since none of them makes a re-derived claim true or false: which
// blocks an audit draws, and which records -part names.

// Sample returns the draw of an audit of n blocks (kernel.Options.Draw)
// with the reader's seed, or with seed "" a random one, which the writer
// cannot know: with none the draw would depend on the root alone, which
// the writer can grind. It returns nil for n <= 0, and the draw returns a
// nil Audit (every block) when n covers them all.
func Sample(n int, seed string) func(root kernel.Hash, blocks int) (*kernel.Audit, error) {
	if n <= 0 {
		return nil
	}
	return func(root kernel.Hash, blocks int) (*kernel.Audit, error) {
		if n >= blocks {
			return nil, nil
		}
		a := &kernel.Audit{Blocks: blocks, Seed: seed, SeedFrom: "reader"}
		if seed == "" {
			var b [16]byte
			if _, err := rand.Read(b[:]); err != nil {
				return nil, err
			}
			a.Seed, a.SeedFrom = hex.EncodeToString(b[:]), "random"
		}
		a.Drawn = AuditDraw(root, a.Seed, blocks, n)
		return a, nil
	}
}

// AuditDraw draws n distinct blocks of m (SPEC.md, section 6, "Audits"):
// with key = BLAKE2b-256("descent audit" 00 || root || seed), the c-th
// candidate is the first 8 bytes of BLAKE2b-256(key || c), big-endian,
// mod m, for c = 0, 1, 2, ...; repeats are skipped.
func AuditDraw(root kernel.Hash, seed string, m, n int) []int {
	key := blake2b.Sum256(append(append([]byte("descent audit\x00"), root[:]...), seed...))
	seen := map[int]bool{}
	var out []int
	for c := uint64(0); len(out) < min(n, m); c++ {
		h := blake2b.Sum256(binary.BigEndian.AppendUint64(key[:], c))
		if i := int(binary.BigEndian.Uint64(h[:8]) % uint64(m)); !seen[i] {
			seen[i], out = true, append(out, i)
		}
	}
	return out
}

// ParsePart reads what -part names: "P", the record P, or "i/N", share i
// of N (kernel.Part checks them against the certificate's records).
func ParsePart(s string) (kernel.Span, *kernel.Failure) {
	si, sn, share := strings.Cut(s, "/")
	i, e1 := strconv.Atoi(si)
	n, e2 := strconv.Atoi(sn)
	if e1 != nil || share && (e2 != nil || n < 1) {
		return kernel.Span{}, &kernel.Failure{Class: kernel.ErrUsage, Reason: kernel.ReasonPart, Hint: "want a record P or a share i/N, whole numbers with 0 <= i < N",
			Msg: fmt.Sprintf("-part %q names no record and no share", s)}
	}
	if !share {
		n = 0
	}
	return kernel.Span{I: i, N: n}, nil
}
