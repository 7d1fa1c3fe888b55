package check

import (
	"encoding/binary"
	"fmt"
	"io"
	"math/big"
	"os"
	"strconv"
	"strings"
)

// Checking one part of a large certificate against a published root
// (SPEC.md, section 7): only the header, the audit paths of the header and
// of the part's records, their offsets and the records themselves are
// read; the rest of the file is not.

// countingReader counts the bytes read through it, and knows the size
// of what it reads, so that no length read from the file is allocated
// before it is known to fit.
type countingReader struct {
	r    io.ReaderAt
	n    int64
	size int64
}

func (c *countingReader) ReadAt(p []byte, off int64) (int, error) {
	n, err := c.r.ReadAt(p, off)
	c.n += int64(n)
	return n, err
}

// readAt reads exactly n bytes at off, or reports the file too short; it
// allocates only once the bytes are known to be in the file.
func readAt(r *countingReader, off int64, n int64, what string) ([]byte, *Failure) {
	if n < 0 || n > maxRecordLen {
		return nil, malformed(off, "the %s would be %d bytes", what, n)
	}
	if off < 0 || off > r.size || n > r.size-off {
		return nil, malformed(min(max(off, 0), r.size), "file ends inside the %s (%d bytes at offset %d; the file has %d)", what, n, off, r.size)
	}
	b := make([]byte, n)
	if _, err := r.ReadAt(b, off); err != nil {
		return nil, malformed(off, "file ends inside the %s", what)
	}
	return b, nil
}

// Part checks part of the certificate at path: "P", the record P, or
// "i/N", share i of N of the records, against root.
func Part(path, part string, root [hashLen]byte, o Options) *Report {
	rep := newReport(Options{})
	rep.File, rep.Mode = path, ModePart
	f, err := os.Open(path)
	if err != nil {
		return rep.fail(usageFail(ReasonUnreadable, "cannot read: %v", err))
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return rep.fail(usageFail(ReasonUnreadable, "cannot read: %v", err))
	}
	cr := &countingReader{r: f, size: st.Size()}
	defer func() { rep.BytesRead = cr.n }()
	return checkPart(cr, part, root, o, rep)
}

func checkPart(r *countingReader, part string, root [hashLen]byte, o Options, rep *Report) *Report {
	pre, fl := readAt(r, 0, preambleLen, "preamble")
	if fl != nil {
		return rep.fail(fl)
	}
	// The header is parsed by the same code as in a full check.
	body, fl := readAt(r, preambleLen, int64(binary.BigEndian.Uint32(pre[14:]))&(1<<31-1), "header")
	if fl != nil {
		return rep.fail(fl)
	}
	hf := &file{src: io.MultiReader(strings.NewReader(string(pre)), strings.NewReader(string(body)))}
	if fl := hf.readHeader(); fl != nil {
		return rep.fail(fl)
	}
	if hf.shard != nil {
		fl := usageFail(ReasonPart, "-part checks a whole certificate against its root, and this file is a shard")
		fl.Hint = "check a shard file whole, without -part"
		return rep.fail(fl)
	}
	if hf.hdr != nil {
		rep.describe(hf)
	} else {
		rep.describeRange(hf)
	}
	records := hf.records
	// The stored tree and the offsets must fit in the file before anything
	// is sized by the record count.
	sizes := levelSizes(records + 1)
	treeNodes := int64(0)
	for _, s := range sizes {
		treeNodes += int64(s)
	}
	if end := int64(preambleLen+len(body)) + treeNodes*hashLen + 8*int64(records+1); end > r.size {
		return rep.fail(malformed(r.size, "the file has %d bytes; a certificate of %d records needs %d before its first record", r.size, records, end))
	}
	from, upto := 0, 0
	if i, n, ok := strings.Cut(part, "/"); ok {
		si, e1 := strconv.Atoi(i)
		sn, e2 := strconv.Atoi(n)
		if e1 != nil || e2 != nil || sn < 1 || si < 0 || si >= sn || sn > records {
			fl := usageFail(ReasonPart, "-part %q names no share of this certificate's %d records", part, records)
			fl.Hint = fmt.Sprintf("want i/N with 0 <= i < N <= %d", records)
			return rep.fail(fl)
		}
		from, upto = spanOf(Span{si, sn}, records)
	} else {
		p, err := strconv.Atoi(part)
		if err != nil || p < 0 || p >= records {
			fl := usageFail(ReasonPart, "-part %q names no record of this certificate", part)
			fl.Hint = fmt.Sprintf("want a record from 0 to %d", records-1)
			return rep.fail(fl)
		}
		from, upto = p, p+1
	}
	rep.Span = &SpanReport{First: from, Count: upto - from}
	rep.Root = hexHash(root)

	// Where each level of the stored tree begins.
	levelOff := make([]int64, len(sizes))
	off := int64(preambleLen + len(body))
	for l, s := range sizes {
		levelOff[l] = off
		off += int64(s) * hashLen
	}
	offsetsAt := off
	nodes := map[[2]int][hashLen]byte{}
	node := func(l, i int) ([hashLen]byte, *Failure) {
		if h, ok := nodes[[2]int{l, i}]; ok {
			return h, nil
		}
		b, fl := readAt(r, levelOff[l]+int64(i)*hashLen, hashLen, "stored tree")
		if fl != nil {
			return [hashLen]byte{}, fl
		}
		var h [hashLen]byte
		copy(h[:], b)
		nodes[[2]int{l, i}] = h
		return h, nil
	}
	// proves checks that leaf i hashes up to the root along its audit path.
	proves := func(leaf [hashLen]byte, i int) (bool, *Failure) {
		h := leaf
		for l := 0; l+1 < len(sizes); l++ {
			if sib := i ^ 1; sib < sizes[l] {
				s, fl := node(l, sib)
				if fl != nil {
					return false, fl
				}
				if i&1 == 0 {
					h = nodeHash(h, s)
				} else {
					h = nodeHash(s, h)
				}
			}
			i /= 2
		}
		return h == root, nil
	}
	if ok, fl := proves(leafHash(append(pre, body...)), 0); fl != nil {
		return rep.fail(fl)
	} else if !ok {
		return rep.fail(invalid(ReasonAudit, Where{Claim: "header", Expected: hexHash(root)},
			"the header with its audit path does not lead to the root %s: another certificate, or an altered one", hexHash(root)))
	}

	var sv *sieve
	var stubs []stubState
	var m *memo
	var joins [][]uint64
	if hf.hdr != nil {
		sv = newSieve(hf.hdr)
		sv.useMemo = !o.Plain
		if fl := sv.sieveLimits(budgetOf(o)); fl != nil {
			return rep.fail(fl)
		}
		open, closed := sv.countsByTable()
		if fl := sv.checkCounts(tally{survivors: open, closed: closed}); fl != nil {
			return rep.fail(fl)
		}
		if stubs = sv.stubList(records); len(stubs) != records-1 {
			return rep.fail(invalid(ReasonCount, Where{Claim: "chunks"}, "the header declares %d chunks below the top; the map has %s classes open at depth %d",
				records-1, atLeast(len(stubs), records), sv.d))
		}
		if sv.useMemo {
			m = sv.newMemo()
		}
		if fl := sv.checkExceptions(); fl != nil {
			return rep.fail(fl)
		}
	} else {
		if joins, fl = rangeSieve(hf.rng, rep, o); fl != nil {
			return rep.fail(fl)
		}
		if fl := proveRules(hf.rng); fl != nil {
			return rep.fail(fl)
		}
	}
	var blocks []*blockRec // a range: the part's blocks, derived once all are read
	for g := from; g < upto; g++ {
		b, fl := readAt(r, offsetsAt+8*int64(g), 16, "record offsets")
		if fl != nil {
			return rep.fail(fl)
		}
		a, e := int64(binary.BigEndian.Uint64(b)), int64(binary.BigEndian.Uint64(b[8:]))
		rec, fl := readAt(r, a, e-a, fmt.Sprintf("record %d", g))
		if fl != nil {
			return rep.fail(fl)
		}
		c := g
		if ok, fl := proves(leafHash(rec), g+1); fl != nil {
			return rep.fail(fl)
		} else if !ok {
			return rep.fail(invalid(ReasonAudit, Where{Chunk: &c, Offset: &a, Expected: hexHash(root)},
				"record %d with its audit path does not lead to the root %s: a swapped record, one from another certificate, or an altered tree", g, hexHash(root)))
		}
		if sv != nil {
			if g == 0 {
				_, fl = sv.checkChunk(0, rec, nil, a, nil, len(stubs))
			} else {
				_, fl = sv.checkChunk(g, rec, &stubs[g-1], a, m, 0)
			}
			if fl != nil {
				return rep.fail(fl)
			}
			if o.Progress != nil {
				o.Progress(g+1-from, upto-from)
			}
			continue
		}
		blk, fl := parseBlock(rec, a, len(hf.rng.rules))
		if fl == nil && blk.index != uint32(g) {
			fl = malformed(a, "record %d says it is block %d", g, blk.index)
		}
		if fl == nil {
			fl = blk.addsUp(hf.rng, g, a)
		}
		if fl != nil {
			return rep.fail(fl)
		}
		blocks = append(blocks, blk)
	}
	if sv != nil {
		return rep.finish()
	}
	total, budget := new(big.Int), budgetOf(o)
	for x, blk := range blocks {
		w, _ := blockWork(hf.rng.k, hf.rng.cap, hf.rng.blockSize(from+x), &blk.sum)
		total.Add(total, w)
	}
	if total.Cmp(budget) > 0 {
		return rep.fail(overBudget(fmt.Sprintf("deriving %d blocks of this range", len(blocks)), total, budget))
	}
	s := newSearcher(hf.rng, joins)
	for x, blk := range blocks {
		if fl := s.check(from+x, blk, o.Workers); fl != nil {
			return rep.fail(fl)
		}
		for _, n := range blk.undecided {
			rep.Undecided = append(rep.Undecided, Num(n.String()))
		}
		if o.Progress != nil {
			o.Progress(x+1, len(blocks))
		}
	}
	if hf.rng != nil {
		rep.Below = fatesBelow(hf.rng)
	}
	return rep.finish()
}

// atLeast writes n, or "more than max-1" when a count stopped at max.
func atLeast(n, max int) string {
	if n >= max {
		return fmt.Sprintf("more than %d", max-1)
	}
	return strconv.Itoa(n)
}
