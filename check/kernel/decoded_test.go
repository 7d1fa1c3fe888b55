package kernel

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math/big"
	"reflect"
	"testing"

	"github.com/google/go-cmp/cmp"

	"descent/cert"
)

// The kernel's reading of a certificate, with no judgement of its claims,
// compared field by field with package cert's: two decoders written apart
// from SPEC.md must read the same things from the same bytes.

// decoded is what a certificate says, in a shape both decoders can fill.
type decoded struct {
	Header               []byte
	Records              int
	Map                  string
	K, J                 int
	Cap                  uint32
	Ceiling              int
	Survivors, Joined    uint64
	Joins                bool
	ClosedAt, Exceptions []string
	Tree                 [][][32]byte
	Offsets              []int64
	Chunks               []string // residue, bits, leaves and joins of each chunk
	Range                string   // a range's header fields and totals
	Blocks               []string // a range's blocks
	Shard                string
}

func summaryText(counts []*big.Int, rules []*big.Int, sum *big.Int, maxSigma uint32, maxAt *big.Int, records []string, cycles []string) string {
	return fmt.Sprint(counts, rules, sum, maxSigma, maxAt, records, cycles)
}

func kernelSummary(s Summary) string {
	var recs, cycles []string
	for _, p := range s.Records {
		recs = append(recs, fmt.Sprint(p.N, p.Sigma))
	}
	for _, c := range s.Cycles {
		cycles = append(cycles, fmt.Sprint(c.Min, c.Count))
	}
	return summaryText(s.Counts[:], s.Rules, s.Sum, s.MaxSigma, s.MaxAt, recs, cycles)
}

// Decode reads a whole certificate with the kernel's decoder and the
// grammar of its chunks; it checks no hash and no claim.
func Decode(r io.Reader) (*decoded, error) {
	b, err := io.ReadAll(r)
	if err != nil {
		return nil, err
	}
	f, fl := open(bytes.NewReader(b), int64(len(b)))
	if fl == nil {
		fl = f.readIndex()
	}
	if fl != nil {
		return nil, fl
	}
	d := &decoded{Header: f.Header, Records: f.Records, Offsets: f.Offsets}
	for _, l := range f.Tree {
		hs := make([][32]byte, len(l))
		for i := range l {
			hs[i] = l[i]
		}
		d.Tree = append(d.Tree, hs)
	}
	base := f.base()
	if s := f.Shard; s != nil {
		d.Shard = fmt.Sprint(s.Index, s.Of, s.First, s.Count)
	}
	read := func(i int) []byte { return b[f.Offsets[i]:f.Offsets[i+1]] }
	if h := f.Range; h != nil {
		d.Map, d.K, d.Cap, d.Ceiling = h.Map.String(), h.K, h.Cap, h.Ceiling
		d.Range = fmt.Sprint(h.SieveRoot, h.Lo, h.Hi, h.E, h.Rules, kernelSummary(h.Totals))
		for i := range f.Records {
			if f.Offsets[i+1] > int64(len(b)) {
				return nil, errors.New("record beyond the end")
			}
			blk, fl := h.parseBlock(read(i), base+i, f.Offsets[i])
			if fl != nil {
				return nil, fl
			}
			d.Blocks = append(d.Blocks, fmt.Sprint(blk.Index, kernelSummary(blk.Summary), blk.Undecided))
		}
		if fl := f.end(); fl != nil {
			return nil, fl
		}
		return d, nil
	}
	h := f.Sieve
	d.Map, d.K, d.J, d.Cap, d.Ceiling, d.Survivors, d.Joins, d.Joined = h.Map.String(), h.K, h.J, h.Cap, h.Ceiling, h.Survivors, h.Joins, h.Joined
	d.ClosedAt = []string{fmt.Sprint(h.ClosedAt)}
	for _, e := range h.Exceptions {
		d.Exceptions = append(d.Exceptions, fmt.Sprint(e.N, e.Kind, e.Steps, e.CycleMin))
	}
	p := NewParams(h.Map, h.J)
	for i := range f.Records {
		if f.Offsets[i+1] > int64(len(b)) {
			return nil, errors.New("record beyond the end")
		}
		rec, g := read(i), base+i
		if _, fl := p.chunk(g, rec, f.Offsets[i], nil, 0, h.Joins, false, nil); fl != nil {
			return nil, fl
		}
		// The head, as SPEC.md lays it out: start, first and last depth, code bits.
		begin, start, nbit := int(rec[8]), binary.BigEndian.Uint64(rec), binary.BigEndian.Uint32(rec[10:])
		w := &walk{code: rec[chunkHead:], nbit: uint64(nbit), end: int(rec[9])}
		rest := rec[chunkHead+(nbit+7)/8:]
		from, to := p.D, p.J
		if g == 0 {
			from, to = 0, p.D
		}
		if begin != from || w.end != to {
			return nil, fmt.Errorf("chunk %d spans depths %d..%d", g, begin, w.end)
		}
		var leaves []string
		survivors := 0
		var walk func(res uint64, t int)
		walk = func(res uint64, t int) {
			for ; t < w.end; t++ {
				if x, _ := w.bit(); x == 1 {
					y, _ := w.bit()
					leaves = append(leaves, fmt.Sprint(res|y<<t, t+1, true))
					res |= (1 - y) << t
				} else {
					walk(res, t+1)
					res |= 1 << t
				}
			}
			leaves = append(leaves, fmt.Sprint(res, w.end, false))
			survivors++
		}
		walk(start, begin)
		c := fmt.Sprint(start, w.nbit, leaves)
		if h.Joins && g > 0 {
			joined, deltas, _ := readJoins(rest, survivors, g, 0)
			c += fmt.Sprint(joined, deltas)
		}
		d.Chunks = append(d.Chunks, c)
	}
	if fl := f.end(); fl != nil {
		return nil, fl
	}
	return d, nil
}

// decodeWithCert reads a whole certificate with package cert, in the same
// shape as Decode.
func decodeWithCert(b []byte) (*decoded, error) {
	rd, err := cert.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil, err
	}
	d := &decoded{Header: rd.Header, Records: rd.Layout.Records, Offsets: rd.Offs}
	for _, l := range rd.Levels {
		hs := make([][32]byte, len(l))
		for i := range l {
			hs[i] = l[i]
		}
		d.Tree = append(d.Tree, hs)
	}
	header, base, kind := rd.Header, 0, rd.Kind
	if kind == cert.KindShard {
		sh, err := cert.ParseShardHeader(rd.Header)
		if err != nil {
			return nil, err
		}
		header, base, kind = sh.WholeHeader, sh.First, sh.Whole
		d.Shard = fmt.Sprint(sh.Index, sh.Of, sh.First, sh.Count)
	}
	if kind == cert.KindCensus {
		// The kernel does not decode census certificates yet; so that the
		// two decoders agree, this one refuses them here too.
		return nil, fmt.Errorf("census certificates are not compared")
	}
	summary := func(s cert.Summary) string {
		var recs, cycles []string
		for _, p := range s.Records {
			recs = append(recs, fmt.Sprint(p.N, p.Sigma))
		}
		for _, c := range s.Cycles {
			cycles = append(cycles, fmt.Sprint(c.Min, c.Count))
		}
		rules := s.Rules
		if rules == nil {
			rules = []*big.Int{}
		}
		return summaryText([]*big.Int{s.Sieve, s.Join, s.Search, s.Small, s.Cycle, s.Undecided}, rules, s.SigmaSum, s.MaxSigma, s.MaxAt, recs, cycles)
	}
	if kind == cert.KindRange {
		h, err := cert.ParseRangeHeader(header)
		if err != nil {
			return nil, err
		}
		var rules []Rule
		for _, r := range h.Rules {
			rules = append(rules, Rule{r.M, r.C, r.Mp, r.Cp, r.Steps})
		}
		if rules == nil {
			rules = []Rule{}
		}
		d.Map, d.K, d.Cap, d.Ceiling = h.Map.String(), h.K, h.Cap, h.Ceiling
		d.Range = fmt.Sprint(Hash(h.SieveRoot), h.Lo, h.Hi, h.E, rules, summary(h.Totals))
		for i := 0; ; i++ {
			rec, err := rd.Next()
			if errors.Is(err, io.EOF) {
				return d, nil
			} else if err != nil {
				return nil, err
			}
			blk, err := cert.ParseBlock(rec, rd.Offs[i], len(h.Rules))
			if err != nil {
				return nil, err
			}
			if blk.Index != uint32(base+i) {
				return nil, fmt.Errorf("record %d says it is block %d", base+i, blk.Index)
			}
			// Its counts add up to the numbers of the block (SPEC.md,
			// section 3, a range, step 7), which cert's block decoder, not
			// knowing the header, leaves to its caller.
			first, _ := cert.BlockSpan(h.Lo, h.Hi, h.E)
			lo := new(big.Int).Lsh(first.Add(first, big.NewInt(int64(base+i))), uint(h.E))
			hi := new(big.Int).Add(lo, new(big.Int).Lsh(big.NewInt(1), uint(h.E)))
			if lo.Cmp(h.Lo) < 0 {
				lo = h.Lo
			}
			if hi.Cmp(h.Hi) > 0 {
				hi = h.Hi
			}
			sum := new(big.Int)
			for _, c := range append([]*big.Int{blk.Sieve, blk.Join, blk.Search, blk.Small, blk.Cycle, blk.Undecided}, blk.Rules...) {
				sum.Add(sum, c)
			}
			if sum.Cmp(new(big.Int).Sub(hi, lo)) != 0 {
				return nil, fmt.Errorf("block %d counts %v numbers; it has %v", base+i, sum, new(big.Int).Sub(hi, lo))
			}
			d.Blocks = append(d.Blocks, fmt.Sprint(blk.Index, summary(blk.Summary), blk.UndecidedNs))
		}
	}
	h, err := cert.ParseSieveHeader(header)
	if err != nil {
		return nil, err
	}
	d.Map, d.K, d.J, d.Cap, d.Ceiling, d.Survivors, d.Joins, d.Joined = h.Map.String(), h.K, h.J, h.Cap, h.Ceiling, h.Survivors, h.Joins, h.Joined
	d.ClosedAt = []string{fmt.Sprint(h.ClosedAt)}
	for _, e := range h.Exceptions {
		var steps uint32
		if e.Fate == cert.Descends {
			steps = e.Steps
		}
		d.Exceptions = append(d.Exceptions, fmt.Sprint(e.N, byte(e.Fate), steps, e.CycleMin))
	}
	split := cert.SplitDepth(h.J)
	for i := 0; ; i++ {
		rec, err := rd.Next()
		if errors.Is(err, io.EOF) {
			return d, nil
		} else if err != nil {
			return nil, err
		}
		c, rest, err := cert.ParseChunkJoins(rec, rd.Offs[i])
		if err != nil {
			return nil, err
		}
		if !h.Joins && len(rest) > 0 {
			return nil, fmt.Errorf("chunk %d: %d bytes after the codes", base+i, len(rest))
		}
		from, to := split, h.J
		if base+i == 0 {
			from, to = 0, split
		}
		if c.From != from || c.To != to {
			return nil, fmt.Errorf("chunk %d spans depths %d..%d, want %d..%d", base+i, c.From, c.To, from, to)
		}
		var leaves []string
		open := 0
		if err := c.Walk(func(cl cert.Class) error {
			leaves = append(leaves, fmt.Sprint(cl.Residue, cl.Depth, cl.Closed))
			if !cl.Closed {
				open++
			}
			return nil
		}); err != nil {
			return nil, err
		}
		s := fmt.Sprint(c.Residue, c.NBits, leaves)
		if h.Joins && base+i == 0 && len(rest) > 0 {
			return nil, fmt.Errorf("the top chunk has %d bytes after its codes", len(rest))
		}
		if h.Joins && base+i > 0 {
			j, err := cert.ParseJoins(rest, open, 0)
			if err != nil {
				return nil, err
			}
			deltas := make([]uint64, len(j.Joined))
			for x, at := 0, 0; x < len(j.Joined); x++ {
				if j.Joined[x] {
					deltas[x], at = j.Delta[at], at+1
				}
			}
			s += fmt.Sprint(j.Joined, deltas)
		}
		d.Chunks = append(d.Chunks, s)
	}
}

// FuzzDecodersAgree: the kernel's decoder and package cert's accept the
// same bytes and read the same things from them.
//
//	go test ./check/kernel -run '^$' -fuzz '^FuzzDecodersAgree$' -parallel 1 -fuzztime 10m -fuzzminimizetime 5s
func FuzzDecodersAgree(f *testing.F) {
	addSeeds(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		mine, err1 := decodeWithCert(b)
		theirs, err2 := Decode(bytes.NewReader(b))
		if (err1 == nil) != (err2 == nil) {
			t.Fatalf("decoders disagree: cert says %v, the kernel says %v", err1, err2)
		}
		if err1 == nil && !reflect.DeepEqual(mine, theirs) { // cmp.Diff only to explain: it is slow
			t.Fatalf("decoders read different things (-cert +kernel):\n%s", cmp.Diff(mine, theirs))
		}
	})
}
