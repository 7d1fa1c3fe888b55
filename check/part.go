package check

import (
	"encoding/binary"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
)

// Checking one part of a large certificate against a published root
// (SPEC.md, section 7): only the header, the audit paths of the header and
// of the part's records, their offsets and the records themselves are
// read; the rest of the file is not.

// countingReader counts the bytes read through it.
type countingReader struct {
	r io.ReaderAt
	n int64
}

func (c *countingReader) ReadAt(p []byte, off int64) (int, error) {
	n, err := c.r.ReadAt(p, off)
	c.n += int64(n)
	return n, err
}

// readAt reads exactly n bytes at off, or reports the file too short.
func readAt(r io.ReaderAt, off int64, n int64, what string) ([]byte, *Failure) {
	if n < 0 || n > maxRecordLen {
		return nil, malformed(off, "the %s would be %d bytes", what, n)
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
		return rep.fail(&Failure{Class: ErrMalformed, Reason: "unreadable", Msg: "cannot read: " + err.Error()})
	}
	defer f.Close()
	cr := &countingReader{r: f}
	defer func() { rep.BytesRead = cr.n }()
	return checkPart(cr, part, root, o, rep)
}

func checkPart(r io.ReaderAt, part string, root [hashLen]byte, o Options, rep *Report) *Report {
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
		return rep.fail(malformed(9, "-part checks a whole certificate against its root; check a shard file whole"))
	}
	if hf.hdr != nil {
		rep.describe(hf)
	} else {
		rep.describeRange(hf)
	}
	records := hf.records
	from, upto := 0, 0
	if i, n, ok := strings.Cut(part, "/"); ok {
		si, e1 := strconv.Atoi(i)
		sn, e2 := strconv.Atoi(n)
		if e1 != nil || e2 != nil || sn < 1 || si < 0 || si >= sn || sn > records {
			return rep.fail(&Failure{Class: ErrMalformed, Reason: "malformed", Msg: fmt.Sprintf("-part %q: want i/N with 0 <= i < N <= %d", part, records)})
		}
		from, upto = spanOf(Span{si, sn}, records)
	} else {
		p, err := strconv.Atoi(part)
		if err != nil || p < 0 || p >= records {
			return rep.fail(&Failure{Class: ErrMalformed, Reason: "malformed", Msg: fmt.Sprintf("-part %q: want a record from 0 to %d", part, records-1)})
		}
		from, upto = p, p+1
	}
	rep.Span = &SpanReport{First: from, Count: upto - from}
	rep.Root = hexHash(root)

	// Where each level of the stored tree begins.
	sizes := levelSizes(records + 1)
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
		return rep.fail(invalid("audit", Where{Claim: "header", Expected: hexHash(root)},
			"the header with its audit path does not lead to the root %s: another certificate, or an altered one", hexHash(root)))
	}

	var sv *sieve
	var stubs []stubState
	var s *searcher
	var m *memo
	if hf.hdr != nil {
		sv = newSieve(hf.hdr)
		sv.useMemo, sv.work = !o.Plain, newMeter()
		open, closed := sv.countsByTable()
		if fl := sv.checkCounts(tally{survivors: open, closed: closed}); fl != nil {
			return rep.fail(fl)
		}
		if stubs = sv.stubList(); len(stubs) != records-1 {
			return rep.fail(invalid("count", Where{Claim: "chunks"}, "the header declares %d chunks below the top; the map has %d classes open at depth %d", records-1, len(stubs), sv.d))
		}
		if sv.useMemo {
			m = sv.newMemo()
		}
		if fl := sv.checkExceptions(); fl != nil {
			return rep.fail(fl)
		}
	} else {
		if fl := rangeSieve(hf.rng, rep, o); fl != nil {
			return rep.fail(fl)
		}
		if fl := proveRules(hf.rng); fl != nil {
			return rep.fail(fl)
		}
		s = newSearcher(hf.rng)
	}
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
			return rep.fail(invalid("audit", Where{Chunk: &c, Offset: &a, Expected: hexHash(root)},
				"record %d with its audit path does not lead to the root %s: a swapped record, one from another certificate, or an altered tree", g, hexHash(root)))
		}
		var blk *blockRec
		if sv != nil {
			if g == 0 {
				_, fl = sv.checkChunk(0, rec, nil, a, nil, len(stubs))
			} else {
				_, fl = sv.checkChunk(g, rec, &stubs[g-1], a, m, 0)
			}
		} else {
			if blk, fl = parseBlock(rec, a); fl == nil {
				if blk.index != uint32(g) {
					fl = malformed(a, "record %d says it is block %d", g, blk.index)
				} else if fl = blk.addsUp(hf.rng, g, a); fl != nil {
				} else {
					want, _ := s.derive(g, defaultWorkers(o.Workers))
					if fl = s.sv.work.exceeded(); fl == nil {
						fl = compareBlock(g, want, blk)
					}
				}
			}
		}
		if fl != nil {
			return rep.fail(fl)
		}
		if blk != nil {
			for _, n := range blk.undecided {
				rep.Undecided = append(rep.Undecided, Num(n.String()))
			}
		}
	}
	if hf.rng != nil {
		rep.Below = fatesBelow(hf.rng)
	}
	return rep.finish()
}
