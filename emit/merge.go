package emit

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"sort"

	"descent/cert"
)

// ShardInput is one shard file for Merge.
type ShardInput struct {
	Name string
	R    io.Reader
}

// Merge refuses a set of shards for one of two kinds of reason, which a
// caller reports differently: the files given are not the shards of one
// certificate (a mistake of whoever chose them), or a shard's bytes do
// not match the hashes it stores (the shard is damaged or was altered).
var (
	// ErrShardSet is wrapped when the files are not exactly the shards
	// 0..N-1 of one certificate: a whole certificate or another kind of
	// file among them, shards of different certificates or shard counts,
	// a shard missing or given twice.
	ErrShardSet = errors.New("the files are not the shards of one certificate")
	// ErrShardHash is wrapped when a shard's header, stored tree or a
	// record does not match its hashes.
	ErrShardHash = errors.New("a shard does not match its hashes")
)

// kindWords names a certificate kind for a person.
func kindWords(k byte) string {
	switch k {
	case cert.KindSieve:
		return "a sieve certificate"
	case cert.KindJoins:
		return "a sieve certificate with joins"
	case cert.KindRange:
		return "a range certificate"
	case cert.KindCensus:
		return "a census certificate"
	case cert.KindShard:
		return "a shard"
	}
	return "a file of an unknown kind"
}

// Merge checks every shard's hashes and that together they are exactly
// the shards 0..N-1 of one certificate, and writes that certificate to w:
// the same bytes, and so the same root, as a run on one machine.
func Merge(w io.WriterAt, shards []ShardInput) (*RangeResult, cert.Hash, error) {
	if len(shards) == 0 {
		return nil, cert.Hash{}, fmt.Errorf("%w: no shards given", ErrShardSet)
	}
	type shard struct {
		name string
		rd   *cert.Reader
		h    *cert.ShardHeader
	}
	var all []shard
	for _, in := range shards {
		rd, err := cert.NewReader(in.R)
		if err != nil {
			return nil, cert.Hash{}, fmt.Errorf("%s: %w", in.Name, err)
		}
		if rd.Kind != cert.KindShard {
			return nil, cert.Hash{}, fmt.Errorf("%w: %s is %s, not a shard; merge takes the files written with -shard", ErrShardSet, in.Name, kindWords(rd.Kind))
		}
		h, err := cert.ParseShardHeader(rd.Header)
		if err != nil {
			return nil, cert.Hash{}, fmt.Errorf("%s: %w", in.Name, err)
		}
		if err := rd.CheckTree(); err != nil {
			if errors.Is(err, cert.ErrHashMismatch) {
				return nil, cert.Hash{}, fmt.Errorf("%w: %s: its header and stored tree do not match (%v): the file is damaged or was altered", ErrShardHash, in.Name, err)
			}
			return nil, cert.Hash{}, fmt.Errorf("%s: %w", in.Name, err)
		}
		all = append(all, shard{in.Name, rd, h})
	}
	first := all[0]
	for _, s := range all[1:] {
		switch {
		case !bytes.Equal(s.h.WholeHeader, first.h.WholeHeader):
			return nil, cert.Hash{}, fmt.Errorf("%w: %s is a shard of another certificate than %s (another map, k, j, range or sieve)", ErrShardSet, s.name, first.name)
		case s.h.Of != first.h.Of:
			return nil, cert.Hash{}, fmt.Errorf("%w: %s is shard %d of %d, but %s is one of %d", ErrShardSet, s.name, s.h.Index, s.h.Of, first.name, first.h.Of)
		}
	}
	sort.SliceStable(all, func(i, j int) bool { return all[i].h.Index < all[j].h.Index })
	for i, s := range all {
		if i > 0 && s.h.Index == all[i-1].h.Index && s.name == all[i-1].name {
			return nil, cert.Hash{}, fmt.Errorf("%w: %s is given twice", ErrShardSet, s.name)
		}
		if i > 0 && s.h.Index == all[i-1].h.Index {
			return nil, cert.Hash{}, fmt.Errorf("%w: %s and %s are both shard %d", ErrShardSet, all[i-1].name, s.name, s.h.Index)
		}
	}
	for want := 0; want < first.h.Of; want++ {
		if want >= len(all) || all[want].h.Index != want {
			return nil, cert.Hash{}, fmt.Errorf("%w: shard %d of %d is missing; give all %d shards", ErrShardSet, want, first.h.Of, first.h.Of)
		}
	}

	// next reads the records of the shards in order, each checked against
	// the hash its shard stores.
	type record struct {
		rec  []byte
		leaf cert.Hash
	}
	var s, i int
	next := func() (*record, error) {
		for s < len(all) {
			sh := all[s]
			rec, err := sh.rd.Next()
			if err == io.EOF {
				s, i = s+1, 0
				continue
			}
			if err != nil {
				return nil, fmt.Errorf("%s: %w", sh.name, err)
			}
			leaf := cert.LeafHash(rec)
			if leaf != sh.rd.Levels[0][i+1] {
				return nil, fmt.Errorf("%w: %s: record %d of the whole (its record %d) does not match the hash the shard stores for it: the file is damaged or was altered", ErrShardHash, sh.name, sh.h.First+i, i)
			}
			i++
			return &record{rec, leaf}, nil
		}
		return nil, io.EOF
	}

	header := first.h.WholeHeader
	var buffered []*record
	var res *RangeResult
	if first.h.Whole == cert.KindRange {
		// A range's totals are the sum of its blocks: read them all first.
		h, err := cert.ParseRangeHeader(header)
		if err != nil {
			return nil, cert.Hash{}, err
		}
		var blocks []*cert.Block
		for {
			r, err := next()
			if err == io.EOF {
				break
			}
			if err != nil {
				return nil, cert.Hash{}, err
			}
			b, err := cert.ParseBlock(r.rec, 0, len(h.Rules))
			if err != nil {
				return nil, cert.Hash{}, err
			}
			blocks = append(blocks, b)
			buffered = append(buffered, r)
		}
		h.Totals = totals(blocks, len(h.Rules))
		if header, err = h.Marshal(); err != nil {
			return nil, cert.Hash{}, err
		}
		res = &RangeResult{Header: h}
	}
	if first.h.Whole == cert.KindCensus {
		// A census's totals likewise: its tables summed and records merged.
		h, err := cert.ParseCensusHeader(header)
		if err != nil {
			return nil, cert.Hash{}, err
		}
		t := newCensusTotals()
		for k := 0; ; k++ {
			r, err := next()
			if err == io.EOF {
				break
			}
			if err != nil {
				return nil, cert.Hash{}, err
			}
			b, err := cert.ParseCensusBlock(r.rec, 0)
			if err == nil {
				err = h.CheckCensusBlockSpan(b, k, 0)
			}
			if err != nil {
				return nil, cert.Hash{}, fmt.Errorf("block %d: %w", k, err)
			}
			t.add(b)
			buffered = append(buffered, r)
		}
		h.Totals = t.summary()
		if header, err = h.Marshal(); err != nil {
			return nil, cert.Hash{}, err
		}
	}
	cw, err := cert.NewWriter(w, header)
	if err != nil {
		return nil, cert.Hash{}, err
	}
	for k := 0; ; k++ {
		var r *record
		if buffered != nil {
			if k == len(buffered) {
				break
			}
			r = buffered[k]
		} else if r, err = next(); err == io.EOF {
			break
		} else if err != nil {
			return nil, cert.Hash{}, err
		}
		if err := cw.WriteRecord(r.rec, r.leaf); err != nil {
			return nil, cert.Hash{}, err
		}
	}
	root, size, err := cw.Close()
	if err != nil {
		return nil, cert.Hash{}, err
	}
	if res != nil {
		res.Root, res.Size = root, size
	}
	return res, root, nil
}
