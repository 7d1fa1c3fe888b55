package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/base64"
	"encoding/binary"
	"errors"
	"flag"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
	"descent/check"
	"descent/check/kernel"
	"descent/internal/certtest"
)

// Hostile test vectors (testdata/vectors): each file is one certificate
// with the outcome every entry point must give it. The generator below
// derives them from a few good certificates, and TestVectors runs each
// through every entry point. Regenerate with
//
//	go test ./cmd/descent -run TestVectors -update
//
// The structural vectors (truncations, garbage, forgeries with recomputed
// hashes, regressions) are committed as files. The single-bit flips of the
// good certificates are not: the test makes them from the committed good
// vectors, classifies each, and pins the whole list of their expected
// outcomes with one digest (testdata/vectors/flips.digest), so that a
// change in any outcome shows as a changed digest to explain.
//
// A vector file is text:
//
//	descent test vector
//	description: <one line>
//	sieve: <the vector a range vector rests on, or empty>
//	decoder: ok | malformed
//	check: valid | malformed | hash | claim | limits
//	show: ok | malformed | hash
//	merge: ok | refused | malformed   (merged with the partner shard, if any)
//	partner: <the good shard this one is merged with, for shards>
//	flip: <base vector> <byte> <bit>   (only for single-bit flips)
//
//	<the certificate, base64; empty for a flip, which is its base with
//	that one bit flipped>
//
// The expected outcomes come from the generator's classifier, written on
// package cert, so that the checker is tested against code other than its
// own: "malformed" when the bytes break the format, "hash" when a stored
// hash does not match what it covers, "claim" for a certificate whose
// hashes all match but whose claims are false.

var update = flag.Bool("update", false, "rewrite testdata/vectors from the generator")

const vectorDir = "../../testdata/vectors"

type vector struct {
	name, description, sieve string
	decoder, check, show     string
	merge, partner           string
	flip                     string // "base byte bit", for a single-bit flip
	data                     []byte
}

func (v vector) encode() []byte {
	var b bytes.Buffer
	fmt.Fprintf(&b, "descent test vector\ndescription: %s\nsieve: %s\ndecoder: %s\ncheck: %s\nshow: %s\nmerge: %s\npartner: %s\n",
		v.description, v.sieve, v.decoder, v.check, v.show, v.merge, v.partner)
	if v.flip != "" {
		fmt.Fprintf(&b, "flip: %s\n\n", v.flip)
		return b.Bytes()
	}
	b.WriteString("\n")
	enc := base64.StdEncoding.EncodeToString(v.data)
	for len(enc) > 76 {
		b.WriteString(enc[:76] + "\n")
		enc = enc[76:]
	}
	b.WriteString(enc + "\n")
	return b.Bytes()
}

func parseVector(name string, raw []byte) (vector, error) {
	head, body, ok := strings.Cut(string(raw), "\n\n")
	if !ok || !strings.HasPrefix(head, "descent test vector\n") {
		return vector{}, fmt.Errorf("%s: not a test vector", name)
	}
	v := vector{name: name}
	for _, line := range strings.Split(head, "\n")[1:] {
		key, val, _ := strings.Cut(line, ": ")
		switch key {
		case "description":
			v.description = val
		case "sieve":
			v.sieve = val
		case "decoder":
			v.decoder = val
		case "check":
			v.check = val
		case "show":
			v.show = val
		case "flip":
			v.flip = val
		case "merge":
			v.merge = val
		case "partner":
			v.partner = val
		}
	}
	data, err := base64.StdEncoding.DecodeString(strings.ReplaceAll(body, "\n", ""))
	v.data = data
	return v, err
}

// --- the classifier, on package cert -----------------------------------

// classify says what a certificate is, by the order in which a checker
// looks (SPEC.md, section 3): the layout and header first, then the stored
// hashes, then each record's hash before its framing. It returns the
// decoder's outcome and the outcome of the hash-level checks: malformed,
// hash, or ok (the claims are then the checker's to judge).
func classify(b []byte) (decoder, hashes string) {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return "malformed", "malformed"
	}
	var parse func(rec []byte, i int, base int64) error
	kind, header, first := rd.Kind, rd.Header, 0
	if kind == cert.KindShard {
		sh, err := cert.ParseShardHeader(rd.Header)
		if err != nil {
			return "malformed", "malformed"
		}
		kind, header, first = sh.Whole, sh.WholeHeader, sh.First
	}
	switch kind {
	case cert.KindSieve, cert.KindJoins:
		h, err := cert.ParseSieveHeader(header)
		if err != nil {
			return "malformed", "malformed"
		}
		d := cert.SplitDepth(h.J)
		// A record is decoded in full before it is judged (SPEC.md,
		// section 3): its head, its codes by the grammar from its own
		// depths, its join section; then whether its depths are the ones
		// the header calls for.
		parse = func(rec []byte, i int, base int64) error {
			i += first
			c, rest, err := cert.ParseChunkJoins(rec, base)
			if err != nil {
				return err
			}
			if len(rest) > 0 && (!h.Joins || i == 0) {
				return cert.ErrMalformed
			}
			survivors, err := c.Open()
			if err != nil {
				return err
			}
			if h.Joins && i > 0 {
				if _, err := cert.ParseJoins(rest, survivors, base); err != nil {
					return err
				}
			}
			from, to := d, h.J
			if i == 0 {
				from, to = 0, d
			}
			if c.From != from || c.To != to {
				return errDepths
			}
			return nil
		}
	case cert.KindRange:
		rh, err := cert.ParseRangeHeader(header)
		if err != nil {
			return "malformed", "malformed"
		}
		parse = func(rec []byte, i int, base int64) error {
			blk, err := cert.ParseBlock(rec, base, len(rh.Rules))
			if err == nil && blk.Index != uint32(first+i) {
				err = cert.ErrMalformed
			}
			return err
		}
	}
	hashes = "ok"
	if rd.CheckTree() != nil {
		hashes = "hash"
	}
	decoder = "ok"
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			if hashes == "ok" {
				hashes = "malformed"
			}
			return "malformed", hashes
		}
		if hashes == "ok" && cert.LeafHash(rec) != rd.Levels[0][i+1] {
			hashes = "hash"
		}
		if err := parse(rec, i, rd.Offs[i]); err != nil {
			decoder = "malformed"
			if hashes == "ok" {
				if errors.Is(err, errDepths) {
					hashes = "claim" // a hashed chunk whose depths contradict the header
				} else {
					hashes = "malformed"
				}
			}
		}
	}
	return decoder, hashes
}

var errDepths = errors.New("chunk depths differ from the header's")

// showOutcome is what show can see: the layout, the header and the stored
// tree, and for a range the block records and their hashes.
func showOutcome(b []byte) string {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return "malformed"
	}
	if rd.Kind == cert.KindShard {
		if _, err := cert.ParseShardHeader(rd.Header); err != nil {
			return "malformed"
		}
		if rd.CheckTree() != nil {
			return "hash"
		}
		return "ok"
	}
	if rd.Kind == cert.KindSieve || rd.Kind == cert.KindJoins {
		if _, err := cert.ParseSieveHeader(rd.Header); err != nil {
			return "malformed"
		}
		if rd.CheckTree() != nil {
			return "hash"
		}
		return "ok"
	}
	rh, err := cert.ParseRangeHeader(rd.Header)
	if err != nil {
		return "malformed"
	}
	if rd.CheckTree() != nil {
		return "hash"
	}
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			return "ok"
		}
		if err != nil {
			return "malformed"
		}
		if cert.LeafHash(rec) != rd.Levels[0][i+1] {
			return "hash"
		}
		if _, err := cert.ParseBlock(rec, 0, len(rh.Rules)); err != nil {
			return "malformed"
		}
	}
}

// mergeOutcome is what merge must do with a vector (and its partner
// shard): refuse a file that is not a shard of the partner's certificate or
// whose hashes fail, report a malformed one, and merge the rest, whose
// claims are the checker's to judge.
func mergeOutcome(data []byte, shard bool, decoder, hashes string) string {
	rd, err := cert.NewReader(bytes.NewReader(data))
	if err != nil {
		return "malformed"
	}
	switch {
	case rd.Kind != cert.KindShard:
		return "refused"
	case hashes == "malformed":
		return "malformed"
	}
	if _, err := cert.ParseShardHeader(rd.Header); err != nil {
		return "malformed"
	}
	if hashes == "hash" || !shard {
		return "refused"
	}
	return "ok"
}

// mergeStatus is the exit status of merge for a vector's outcome: 0 when
// it merges; 1 when it refuses a shard whose header, stored tree or a
// record does not match its hashes (a damaged certificate); 2 for any
// other refusal (a file that is not a shard, an incomplete set: a mistake
// in the files given) and for a malformed file. Merge checks each file's
// kind, header and stored tree first, then that the set is complete, then
// the records.
func mergeStatus(v *vector) int {
	switch v.merge {
	case "ok":
		return exitOK
	case "malformed":
		return exitUsage
	}
	rd, err := cert.NewReader(bytes.NewReader(v.data))
	switch {
	case err != nil || rd.Kind != cert.KindShard:
		return exitUsage
	case rd.CheckTree() != nil:
		return exitInvalid
	case v.partner == "":
		return exitUsage
	}
	return exitInvalid // with its partner, a shard is refused only for a record's hash
}

// --- the generator -------------------------------------------------------

type good struct {
	name, sieve, partner string
	flips                bool // every single-bit flip becomes a vector
	data                 []byte
}

func emitGood(t *testing.T, dir string) []good {
	mk := func(name string, args ...string) []byte {
		path := filepath.Join(dir, name)
		code, _, stderr := runCLI(append(args, "-o", path)...)
		require.Equal(t, exitOK, code, stderr)
		b, err := os.ReadFile(path)
		require.NoError(t, err)
		return b
	}
	s4 := mk("sieve-3n+1-k4", "emit", "sieve", "-k", "4")
	s6 := mk("sieve-5n+1-k6", "emit", "sieve", "-k", "6", "-map", "5n+1", "-cap", "200")
	r := mk("range-3n+1-k4", "emit", "range", "-sieve", filepath.Join(dir, "sieve-3n+1-k4"), "-from", "1", "-to", "30", "-block", "5")
	j7 := mk("sieve-3n+1-k7-joins", "emit", "sieve", "-k", "7", "-join")
	rr := mk("range-3n+1-k4-rules", "emit", "range", "-sieve", filepath.Join(dir, "sieve-3n+1-k4"), "-from", "1", "-to", "30", "-block", "5", "-rules", "auto")
	rj := mk("range-3n+1-k7-joins", "emit", "range", "-sieve", filepath.Join(dir, "sieve-3n+1-k7-joins"), "-from", "1", "-to", "300", "-block", "7", "-rules", "auto")
	sh0 := mk("shard0", "emit", "sieve", "-k", "8", "-shard", "0/2")
	sh1 := mk("shard1", "emit", "sieve", "-k", "8", "-shard", "1/2")
	return []good{
		{"sieve-3n+1-k4", "", "", true, s4}, {"sieve-5n+1-k6", "", "", false, s6},
		{"range-3n+1-k4-to-30", "sieve-3n+1-k4", "", true, r},
		{"shard-0of2-3n+1-k8", "", "shard-1of2-3n+1-k8-0000.vec", false, sh0},
		{"shard-1of2-3n+1-k8", "", "shard-0of2-3n+1-k8-0000.vec", true, sh1},
		{"sieve-3n+1-k7-joins", "", "", true, j7},
		{"range-3n+1-k4-to-30-rules", "sieve-3n+1-k4", "", true, rr},
		{"range-3n+1-k7-joins-to-300", "sieve-3n+1-k7-joins", "", false, rj},
	}
}

// layoutBoundaries lists the offsets where fields of the file begin.
func layoutBoundaries(b []byte) []int {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil
	}
	out := []int{8, 9, 10, 14, cert.PreambleSize, int(rd.Layout.TreeOff), int(rd.Layout.OffsetsOff)}
	for _, o := range rd.Offs {
		out = append(out, int(o))
	}
	for l := range rd.Layout.Sizes {
		out = append(out, int(rd.Layout.NodeOff(l, 0)))
	}
	sort.Ints(out)
	return out
}

// reseal rebuilds a certificate from its header bytes and records, with
// every hash and offset recomputed.
func reseal(header []byte, recs [][]byte) []byte {
	b, err := certtest.Seal(header, recs)
	if err != nil {
		panic(err)
	}
	return b
}

func records(b []byte) (header []byte, recs [][]byte) {
	header, recs, err := certtest.Records(b)
	if err != nil {
		panic(err)
	}
	return header, recs
}

func generate(t *testing.T) []vector {
	goods := emitGood(t, t.TempDir())
	var out []vector
	count := map[string]int{}
	// add records a vector; forged says its hashes were recomputed over a
	// false claim, so that it is a claim failure when its hashes hold.
	add := func(g good, desc string, data []byte, forged bool, flip string) {
		dec, hashes := classify(data)
		checkClass := hashes
		if hashes == "ok" {
			checkClass = "valid"
			if forged {
				checkClass = "claim"
			}
		}
		sieve := ""
		if g.sieve != "" {
			sieve = g.sieve + "-0000.vec"
		}
		out = append(out, vector{
			name:        fmt.Sprintf("%s-%04d.vec", g.name, count[g.name]),
			description: desc, sieve: sieve, decoder: dec, check: checkClass, show: showOutcome(data), flip: flip, data: data,
			merge: mergeOutcome(data, g.partner != "", dec, hashes), partner: g.partner,
		})
		count[g.name]++
	}
	rng := rand.New(rand.NewPCG(6, 1))
	for _, g := range goods {
		b := g.data
		add(g, "the good certificate", b, false, "")
		for i := range len(b) * 8 {
			if !g.flips {
				break
			}
			bad := bytes.Clone(b)
			bad[i/8] ^= 0x80 >> (i % 8)
			add(g, fmt.Sprintf("bit %d of byte %d flipped", 7-i%8, i/8), bad, false, fmt.Sprintf("%s-0000.vec %d %d", g.name, i/8, 7-i%8))
		}
		cuts := layoutBoundaries(b)
		for range 8 {
			cuts = append(cuts, 1+rng.IntN(len(b)-1))
		}
		for _, n := range cuts {
			if n > 0 && n < len(b) {
				add(g, fmt.Sprintf("truncated to %d bytes", n), b[:n], false, "")
			}
		}
		add(g, "one byte of leading garbage", append([]byte{0}, b...), false, "")
		add(g, "one byte of trailing garbage", append(bytes.Clone(b), 0), false, "")
		add(g, "a copy of itself appended", append(bytes.Clone(b), b...), false, "")
		for _, d := range []int{-1, 1} {
			for _, field := range []struct {
				name string
				off  int
			}{{"record count", 10}, {"header length", 14}} {
				bad := bytes.Clone(b)
				binary.BigEndian.PutUint32(bad[field.off:], uint32(int(binary.BigEndian.Uint32(bad[field.off:]))+d))
				add(g, fmt.Sprintf("the %s off by %+d", field.name, d), bad, false, "")
			}
		}
		header, recs := records(b)
		if len(recs) >= 2 {
			sw := append([][]byte(nil), recs...)
			sw[0], sw[len(sw)-1] = sw[len(sw)-1], sw[0]
			add(g, "first and last records swapped, hashes recomputed", reseal(bytes.Clone(header), sw), true, "")
			add(g, "last record dropped, hashes recomputed", reseal(bytes.Clone(header), recs[:len(recs)-1]), true, "")
		}
		add(g, "last record duplicated, hashes recomputed", reseal(bytes.Clone(header), append(append([][]byte(nil), recs...), recs[len(recs)-1])), true, "")
		rd, _ := cert.NewReader(bytes.NewReader(b))
		hashAt := func(level, i int) int { return int(rd.Layout.NodeOff(level, i)) }
		if len(rd.Levels[0]) >= 2 {
			bad := bytes.Clone(b)
			x, y := hashAt(0, 0), hashAt(0, 1)
			tmp := append([]byte(nil), bad[x:x+32]...)
			copy(bad[x:], bad[y:y+32])
			copy(bad[y:], tmp)
			add(g, "the first two leaf hashes swapped", bad, false, "")
			bad = bytes.Clone(b)
			copy(bad[hashAt(0, 1):], bad[hashAt(0, 0):hashAt(0, 0)+32])
			add(g, "a leaf hash duplicated over its neighbour", bad, false, "")
		}
	}
	// Joins: a delta moved by one and a survivor's flag set, with the
	// hashes recomputed over the false claim.
	for _, g := range goods {
		if g.data[9] != cert.KindJoins {
			continue
		}
		header, recs := records(g.data)
		for i := 1; i < len(recs); i++ {
			c, rest, _ := cert.ParseChunkJoins(recs[i], 0)
			open, _ := c.Open()
			j, err := cert.ParseJoins(rest, open, 0)
			if err != nil || len(j.Delta) == 0 {
				continue
			}
			forge := func(desc string, f func(j *cert.Joins)) {
				fj := cert.Joins{Joined: append([]bool(nil), j.Joined...), Delta: append([]uint64(nil), j.Delta...)}
				f(&fj)
				rs := append([][]byte(nil), recs...)
				rs[i] = cert.AppendJoins(c.Marshal(), fj)
				add(g, desc, reseal(bytes.Clone(header), rs), true, "")
			}
			forge("a join's delta off by one, hashes recomputed", func(j *cert.Joins) { j.Delta[0]++ })
			forge("a join's partner below zero, hashes recomputed", func(j *cert.Joins) { j.Delta[0] = 1 << 63 })
			forge("a join's flag cleared, its delta kept, hashes recomputed", func(j *cert.Joins) {
				for x := range j.Joined {
					if j.Joined[x] {
						j.Joined[x] = false
						break
					}
				}
			})
			break
		}
	}
	// Regressions, named after the bug they found.
	v1 := bytes.Clone(goods[0].data)
	v1[8] = 1
	add(goods[0], "regression: a file of format version 1, an older format to re-emit", v1, false, "")
	for _, g := range goods {
		if g.partner == "" {
			continue
		}
		b := bytes.Clone(g.data)
		binary.BigEndian.PutUint32(b[cert.PreambleSize+5:], 0)
		add(g, "regression: a shard count of 0 made the checker divide by zero", b, false, "")
	}
	// A header from another certificate: with the old hashes, and resealed.
	for i, g := range goods[:2] {
		other := goods[1-i]
		h2, _ := records(other.data)
		_, recs := records(g.data)
		b := bytes.Clone(g.data)
		hl := len(h2)
		if hl == int(binary.BigEndian.Uint32(b[14:]))+cert.PreambleSize {
			copy(b, h2)
			add(g, "the header of "+other.name+" over the same length", b, false, "")
		}
		add(g, "the header of "+other.name+", hashes recomputed", reseal(bytes.Clone(h2), recs), true, "")
	}
	return out
}

const flipDigestFile = "flips.digest"

func writeVectors(t *testing.T, vs []vector) {
	require.NoError(t, os.RemoveAll(vectorDir))
	require.NoError(t, os.MkdirAll(vectorDir, 0o755))
	var flips []vector
	for _, v := range vs {
		if v.flip != "" {
			flips = append(flips, v)
			continue
		}
		require.NoError(t, os.WriteFile(filepath.Join(vectorDir, v.name), v.encode(), 0o644))
	}
	require.NoError(t, os.WriteFile(filepath.Join(vectorDir, flipDigestFile), []byte(flipDigest(flips)+"\n"), 0o644))
}

// flipDigest pins the expected outcomes of the single-bit flips: the
// SHA-256 of their encodings (name, base, bit and outcomes, no data), in
// order of name, and how many there are.
func flipDigest(flips []vector) string {
	sort.Slice(flips, func(i, j int) bool { return flips[i].name < flips[j].name })
	h := sha256.New()
	for _, v := range flips {
		h.Write([]byte(v.name + "\n"))
		h.Write(v.encode())
	}
	return fmt.Sprintf("%d flips, sha256 %x", len(flips), h.Sum(nil))
}

// TestVectors runs every vector through every entry point. With -short,
// only every 16th single-bit flip goes through the entry points; all are
// classified and pinned by the digest.
func TestVectors(t *testing.T) {
	fresh := generate(t)
	if *update {
		writeVectors(t, fresh)
	}
	var structural, flips []vector
	for _, v := range fresh {
		if v.flip != "" {
			flips = append(flips, v)
		} else {
			structural = append(structural, v)
		}
	}
	files, err := filepath.Glob(filepath.Join(vectorDir, "*.vec"))
	require.NoError(t, err)
	require.NotEmpty(t, files, "no vectors: run go test ./cmd/descent -run TestVectors -update")
	require.Len(t, files, len(structural), "the vectors are out of date: run go test ./cmd/descent -run TestVectors -update")
	digest, err := os.ReadFile(filepath.Join(vectorDir, flipDigestFile))
	require.NoError(t, err)
	require.Equal(t, strings.TrimSpace(string(digest)), flipDigest(flips),
		"the single-bit flips' outcomes changed: run go test ./cmd/descent -run TestVectors -update and explain the change")

	// The sieves range vectors rest on are the good ones among the vectors.
	dir := t.TempDir()
	sieves := map[string]string{}
	var vs []vector
	for _, f := range files {
		raw, err := os.ReadFile(f)
		require.NoError(t, err)
		v, err := parseVector(filepath.Base(f), raw)
		require.NoError(t, err)
		vs = append(vs, v)
		if v.description == "the good certificate" {
			path := filepath.Join(dir, v.name)
			require.NoError(t, os.WriteFile(path, v.data, 0o644))
			sieves[v.name] = path
		}
	}
	sort.Slice(structural, func(i, j int) bool { return structural[i].name < structural[j].name })
	for i := range structural {
		require.Equal(t, structural[i].encode(), (&vs[i]).encode(), "%s is out of date: run go test ./cmd/descent -run TestVectors -update", vs[i].name)
	}
	byName := map[string]*vector{}
	for i := range vs {
		byName[vs[i].name] = &vs[i]
	}
	// The flips, made from the committed good vectors.
	for i, v := range flips {
		if testing.Short() && i%16 != 0 {
			continue
		}
		var base string
		var at, bit int
		_, err := fmt.Sscanf(v.flip, "%s %d %d", &base, &at, &bit)
		require.NoError(t, err, v.name)
		require.NotNil(t, byName[base], "%s: no base %s", v.name, base)
		v.data = bytes.Clone(byName[base].data)
		v.data[at] ^= 1 << bit
		vs = append(vs, v)
	}

	behaved, failures := 0, []string{}
	for _, v := range vs {
		got := map[string]string{}
		got["decoder"], _ = classify(v.data)
		path := filepath.Join(dir, "v.dcert")
		require.NoError(t, os.WriteFile(path, v.data, 0o644))
		rep := newChecker(check.Options{}, sieves[v.sieve], false).file(path)
		got["check"] = checkClass(rep)
		// The kernel alone (check -reference) gives the same verdict and reason.
		if ref := newChecker(check.Options{}, sieves[v.sieve], true).file(path); ref.Valid != rep.Valid || ref.Reason != rep.Reason {
			failures = append(failures, fmt.Sprintf("%s: the kernel alone says %v %q (%v), the default checker %v %q (%v)", v.name, ref.Valid, ref.Reason, ref.Err(), rep.Valid, rep.Reason, rep.Err()))
		}
		if _, listed := kernel.LookupReason(rep.Reason); rep.Reason != "" && !listed {
			failures = append(failures, fmt.Sprintf("%s: reason %q is not listed in kernel.Reasons", v.name, rep.Reason))
		}
		code, _, _ := runCLI("show", path)
		got["show"] = map[int]string{exitOK: "ok", exitInvalid: "hash", exitUsage: "malformed"}[code]
		margs := []string{"merge", "-replace", "-o", filepath.Join(dir, "merged.dcert"), path}
		if v.partner != "" {
			partner := filepath.Join(dir, "partner.dcert")
			require.NoError(t, os.WriteFile(partner, byName[v.partner].data, 0o644))
			margs = append(margs, partner)
		}
		code, _, _ = runCLI(margs...)
		got["merge"] = fmt.Sprintf("%s (exit %d)", v.merge, code)
		if code != mergeStatus(&v) {
			got["merge"] = fmt.Sprintf("exit %d", code)
		}
		want := map[string]string{"decoder": v.decoder, "check": v.check, "show": v.show,
			"merge": fmt.Sprintf("%s (exit %d)", v.merge, mergeStatus(&v))}
		ok := true
		for _, ep := range []string{"decoder", "check", "show", "merge"} {
			if got[ep] != want[ep] {
				ok = false
				failures = append(failures, fmt.Sprintf("%s (%s): %s gave %s, want %s (%v)", v.name, v.description, ep, got[ep], want[ep], rep.Err()))
			}
		}
		if ok {
			behaved++
		}
	}
	if len(failures) > 0 {
		if len(failures) > 20 {
			failures = append(failures[:20], fmt.Sprintf("... and %d more", len(failures)-20))
		}
		t.Fatalf("%d of %d vectors behaved:\n%s", behaved, len(vs), strings.Join(failures, "\n"))
	}
	t.Logf("%d of %d vectors behaved", behaved, len(vs))
}

// checkClass maps a checker report to a vector outcome.
func checkClass(rep *Report) string {
	err := rep.Err()
	switch {
	case err == nil:
		return "valid"
	case errors.Is(err, kernel.ErrLimits):
		return "limits"
	case errors.Is(err, kernel.ErrMalformed):
		return "malformed"
	case rep.Reason == "hash" || rep.Reason == "tree" || rep.Reason == "root":
		return "hash"
	}
	return "claim"
}
