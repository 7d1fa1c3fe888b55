package check

import (
	"encoding/hex"
	"fmt"

	"golang.org/x/crypto/blake2b"
)

// Leaf and node hashes carry different first bytes, so that no record can
// pass for an inner node (SPEC.md, "Hashes").
func leafHash(data []byte) [hashLen]byte {
	d, _ := blake2b.New256(nil)
	d.Write([]byte{0})
	d.Write(data)
	var h [hashLen]byte
	d.Sum(h[:0])
	return h
}

func nodeHash(l, r [hashLen]byte) [hashLen]byte {
	buf := make([]byte, 0, 1+2*hashLen)
	buf = append(append(append(buf, 1), l[:]...), r[:]...)
	return blake2b.Sum256(buf)
}

// verifyTree recomputes every inner level of the stored tree from the level
// below and reports the first stored hash that differs.
func verifyTree(tree [][][hashLen]byte) *Failure {
	for l := 1; l < len(tree); l++ {
		below := tree[l-1]
		for i, stored := range tree[l] {
			want := below[2*i]
			if 2*i+1 < len(below) {
				want = nodeHash(below[2*i], below[2*i+1])
			}
			if stored != want {
				return invalid(ReasonTree, Where{}, "stored tree level %d, hash %d is %s; its children give %s",
					l, i, short(stored), short(want))
			}
		}
	}
	return nil
}

func short(h [hashLen]byte) string { return hex.EncodeToString(h[:8]) + "…" }

func hexHash(h [hashLen]byte) string { return hex.EncodeToString(h[:]) }

// ParseRoot reads a root given in hex, as published.
func ParseRoot(s string) ([hashLen]byte, error) {
	var h [hashLen]byte
	b, err := hex.DecodeString(s)
	if err != nil || len(b) != hashLen {
		return h, fmt.Errorf("root %q: want %d hex digits", s, 2*hashLen)
	}
	copy(h[:], b)
	return h, nil
}
