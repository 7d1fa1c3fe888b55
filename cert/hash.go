package cert

import (
	"encoding/hex"
	"errors"
	"fmt"

	"golang.org/x/crypto/blake2b"
)

// Hash is a BLAKE2b-256 digest: a leaf hash, an inner node or a root.
type Hash [32]byte

// String returns h in lowercase hex, the form a paper cites.
func (h Hash) String() string { return hex.EncodeToString(h[:]) }

// ParseHash reads a 64-digit hex hash.
func ParseHash(s string) (Hash, error) {
	var h Hash
	if len(s) != 2*len(h) {
		return h, fmt.Errorf("hash %q: want %d hex digits, have %d", s, 2*len(h), len(s))
	}
	if _, err := hex.Decode(h[:], []byte(s)); err != nil {
		return h, fmt.Errorf("hash %q: %v", s, err)
	}
	return h, nil
}

// Domain separation (SPEC.md, "Hashes"): a leaf and an inner node can never
// hash the same bytes, so no record can pose as a subtree.
const (
	leafPrefix = 0x00
	nodePrefix = 0x01
)

// LeafHash is BLAKE2b-256(0x00 || data).
func LeafHash(data []byte) Hash {
	d, _ := blake2b.New256(nil) // only fails for a key longer than 64 bytes
	d.Write([]byte{leafPrefix})
	d.Write(data)
	var h Hash
	d.Sum(h[:0])
	return h
}

// NodeHash is BLAKE2b-256(0x01 || left || right).
func NodeHash(left, right Hash) Hash {
	var buf [1 + 2*len(Hash{})]byte
	buf[0] = nodePrefix
	copy(buf[1:], left[:])
	copy(buf[1+len(left):], right[:])
	return Hash(blake2b.Sum256(buf[:]))
}

// LevelSizes returns the number of hashes on each level of the tree over n
// leaves, from the leaves (level 0) up to the root (a level of size 1).
// Level l+1 pairs the hashes of level l from the left; an unpaired last hash
// is carried up unchanged. This is the tree of RFC 6962, section 2.1.
func LevelSizes(n int) []int {
	if n < 1 {
		return nil
	}
	sizes := []int{n}
	for n > 1 {
		n = (n + 1) / 2
		sizes = append(sizes, n)
	}
	return sizes
}

// Levels computes every level of the tree over leaves; the last level holds
// the root.
func Levels(leaves []Hash) [][]Hash {
	if len(leaves) == 0 {
		return nil
	}
	levels := [][]Hash{leaves}
	for cur := leaves; len(cur) > 1; {
		next := make([]Hash, (len(cur)+1)/2)
		for i := range next {
			if 2*i+1 < len(cur) {
				next[i] = NodeHash(cur[2*i], cur[2*i+1])
			} else {
				next[i] = cur[2*i]
			}
		}
		levels = append(levels, next)
		cur = next
	}
	return levels
}

// AuditPath returns the sibling hashes that link leaf i to the root, from
// the bottom up. Levels where the node on the path is carried up unpaired
// contribute nothing.
func AuditPath(levels [][]Hash, i int) []Hash {
	var path []Hash
	for l := 0; l < len(levels)-1; l++ {
		if sib := i ^ 1; sib < len(levels[l]) {
			path = append(path, levels[l][sib])
		}
		i /= 2
	}
	return path
}

// AuditPathLen is the exact length of the audit path of leaf i in a tree
// of n leaves. A verifier computes it before hashing anything.
func AuditPathLen(i, n int) int {
	sizes, k := LevelSizes(n), 0
	for l := 0; l+1 < len(sizes); l++ {
		if i^1 < sizes[l] {
			k++
		}
		i /= 2
	}
	return k
}

// ErrAuditPath reports an audit path that does not lead to the root.
var ErrAuditPath = errors.New("audit path does not lead to the root")

// VerifyAuditPath checks that leaf is leaf i of a tree of n leaves whose
// root is root.
func VerifyAuditPath(leaf Hash, i, n int, path []Hash, root Hash) error {
	if i < 0 || i >= n {
		return fmt.Errorf("leaf %d outside a tree of %d leaves", i, n)
	}
	if want := AuditPathLen(i, n); len(path) != want {
		return fmt.Errorf("audit path of leaf %d of %d: want %d hashes, have %d", i, n, want, len(path))
	}
	h, sizes := leaf, LevelSizes(n)
	for l := 0; l < len(sizes)-1; l++ {
		if sib := i ^ 1; sib < sizes[l] {
			if i&1 == 0 {
				h = NodeHash(h, path[0])
			} else {
				h = NodeHash(path[0], h)
			}
			path = path[1:]
		}
		i /= 2
	}
	if h != root {
		return ErrAuditPath
	}
	return nil
}

// treeBuilder computes the levels of the tree as leaves arrive in order,
// holding one pending hash per level, and hands every node to put as soon
// as it is known. The emitter uses it to write the stored tree of a
// certificate in bounded memory.
//
// Leaf 0 (the header) may come last: the nodes that depend on it are the
// first of each level, the left spine, so the builder keeps the right
// sibling of each spine node and folds the spine when leaf 0 arrives.
type treeBuilder struct {
	sizes   []int
	pending []Hash
	right   []*Hash // right[l]: the sibling of the spine node on level l, once known
	put     func(level, index int, h Hash) error
}

func newTreeBuilder(n int, put func(level, index int, h Hash) error) *treeBuilder {
	sizes := LevelSizes(n)
	return &treeBuilder{sizes: sizes, pending: make([]Hash, len(sizes)), right: make([]*Hash, len(sizes)), put: put}
}

// spine adds leaf 0 and computes the first node of every level.
func (b *treeBuilder) spine(leaf Hash) error {
	h := leaf
	for l := 0; ; l++ {
		if err := b.put(l, 0, h); err != nil {
			return err
		}
		if l == len(b.sizes)-1 {
			return nil
		}
		if b.sizes[l] > 1 {
			h = NodeHash(h, *b.right[l])
		}
	}
}

func (b *treeBuilder) add(level, index int, h Hash) error {
	if err := b.put(level, index, h); err != nil {
		return err
	}
	if level == len(b.sizes)-1 {
		return nil
	}
	switch {
	case index == 1: // the right sibling of the spine: its parent waits for leaf 0
		b.right[level] = &h
		return nil
	case index%2 == 1:
		return b.add(level+1, index/2, NodeHash(b.pending[level], h))
	case index == b.sizes[level]-1:
		return b.add(level+1, index/2, h)
	default:
		b.pending[level] = h
		return nil
	}
}
