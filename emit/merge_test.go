package emit

import (
	"bytes"
	"context"
	"fmt"
	"math/big"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func shardsOf(t *testing.T, n int, emitOne func(o *Shard) []byte) []ShardInput {
	var out []ShardInput
	for i := range n {
		out = append(out, ShardInput{Name: "shard" + string(rune('a'+i)), R: bytes.NewReader(emitOne(&Shard{I: i, N: n}))})
	}
	return out
}

func merged(t *testing.T, in []ShardInput) ([]byte, error) {
	var f memFile
	_, _, err := Merge(&f, in)
	return f.b, err
}

func TestMergeIsByteIdentical(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	sieveShard := func(o *Shard) []byte {
		var f memFile
		_, err := Sieve(context.Background(), &f, SieveParams{Map: cert.Collatz, K: 22, J: 22}, Options{Shard: o})
		require.NoError(t, err)
		return f.b
	}
	_, whole := emitSieve(t, cert.Collatz, 22, 22, Options{})
	for _, n := range []int{1, 2, 4, 16} {
		in := shardsOf(t, n, sieveShard)
		rng.Shuffle(len(in), func(i, j int) { in[i], in[j] = in[j], in[i] }) // order on the command line does not matter
		got, err := merged(t, in)
		require.NoError(t, err, "N = %d", n)
		require.True(t, bytes.Equal(whole, got), "N = %d: the merged sieve differs from a one-machine run", n)
	}

	sres, _ := emitSieve(t, cert.Collatz, 12, 12, Options{})
	p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: big.NewInt(5), Hi: big.NewInt(1 << 20), E: 14}
	var f memFile
	_, err := Range(context.Background(), &f, p, RangeOptions{})
	require.NoError(t, err)
	rangeShard := func(o *Shard) []byte {
		var g memFile
		_, err := Range(context.Background(), &g, p, RangeOptions{Shard: o})
		require.NoError(t, err)
		return g.b
	}
	for _, n := range []int{1, 3, 16} {
		in := shardsOf(t, n, rangeShard)
		rng.Shuffle(len(in), func(i, j int) { in[i], in[j] = in[j], in[i] })
		got, err := merged(t, in)
		require.NoError(t, err, "N = %d", n)
		require.True(t, bytes.Equal(f.b, got), "N = %d: the merged range differs from a one-machine run", n)
	}
}

func TestMergeWithJoinsAndRules(t *testing.T) {
	// A sieve with joins (its shards count the joins before they write)
	// and a range with predecessor rules merge to the one-machine bytes.
	joins := func(o *Shard) []byte {
		var f memFile
		_, err := Sieve(context.Background(), &f, SieveParams{Map: cert.Collatz, K: 22, J: 22, Joins: true}, Options{Shard: o})
		require.NoError(t, err)
		return f.b
	}
	whole := joins(nil)
	for _, n := range []int{1, 4} {
		got, err := merged(t, shardsOf(t, n, joins))
		require.NoError(t, err, "N = %d", n)
		require.True(t, bytes.Equal(whole, got), "N = %d: the merged sieve with joins differs from a one-machine run", n)
	}

	sres, _ := emitSieve(t, cert.Collatz, 12, 12, Options{})
	p := RangeParams{Sieve: sres.Header, SieveRoot: sres.Root, Lo: big.NewInt(5), Hi: big.NewInt(1 << 20), E: 14, Rules: AutoRules(cert.Collatz)}
	rules := func(o *Shard) []byte {
		var g memFile
		_, err := Range(context.Background(), &g, p, RangeOptions{Shard: o})
		require.NoError(t, err)
		return g.b
	}
	one := rules(nil)
	got, err := merged(t, shardsOf(t, 3, rules))
	require.NoError(t, err)
	require.True(t, bytes.Equal(one, got), "the merged range with rules differs from a one-machine run")
}

func TestMergeRefuses(t *testing.T) {
	shard := func(m cert.Map, k, j, i, n int) []byte {
		var f memFile
		_, err := Sieve(context.Background(), &f, SieveParams{Map: m, K: k, J: j}, Options{Shard: &Shard{I: i, N: n}})
		require.NoError(t, err)
		return f.b
	}
	in := func(bs ...[]byte) []ShardInput {
		var out []ShardInput
		for i, b := range bs {
			out = append(out, ShardInput{Name: string(rune('a' + i)), R: bytes.NewReader(b)})
		}
		return out
	}
	a0, a1, a2 := shard(cert.Collatz, 14, 14, 0, 3), shard(cert.Collatz, 14, 14, 1, 3), shard(cert.Collatz, 14, 14, 2, 3)
	bad := bytes.Clone(a1)
	bad[len(bad)-1] ^= 1
	// A flipped bit in the stored tree, just after the header.
	tree := bytes.Clone(a2)
	rd, err := cert.NewReader(bytes.NewReader(a2))
	require.NoError(t, err)
	tree[len(rd.Header)+40] ^= 1
	rd1, err := cert.NewReader(bytes.NewReader(a1))
	require.NoError(t, err)
	h1, err := cert.ParseShardHeader(rd1.Header)
	require.NoError(t, err)
	lastRecord := fmt.Sprintf("b: record %d of the whole (its record %d) does not match the hash the shard stores", h1.First+h1.Count-1, h1.Count-1)
	_, whole := emitSieve(t, cert.Collatz, 14, 14, Options{})
	for _, c := range []struct {
		name   string
		shards []ShardInput
		reason string
		class  error // ErrShardSet: the files chosen; ErrShardHash: a damaged shard
	}{
		{"a missing shard", in(a0, a2), "shard 1 of 3 is missing", ErrShardSet},
		{"a duplicate shard", in(a0, a1, a1, a2), "are both shard 1", ErrShardSet},
		{"another map", in(a0, shard(cert.Map{A: 3, B: -1}, 14, 14, 1, 3), a2), "a shard of another certificate", ErrShardSet},
		{"another k", in(a0, shard(cert.Collatz, 15, 14, 1, 3), a2), "a shard of another certificate", ErrShardSet},
		{"another j", in(a0, shard(cert.Collatz, 14, 13, 1, 3), a2), "a shard of another certificate", ErrShardSet},
		{"another shard count", in(a0, a1, shard(cert.Collatz, 14, 14, 2, 4)), "is one of 3", ErrShardSet},
		{"a damaged shard", in(a0, bad, a2), lastRecord, ErrShardHash},
		{"a damaged stored tree", in(a0, a1, tree), "c: its header and stored tree do not match", ErrShardHash},
		{"a whole certificate", in(a0, whole, a2), "b is a sieve certificate, not a shard", ErrShardSet},
	} {
		_, err := merged(t, c.shards)
		require.ErrorContains(t, err, c.reason, c.name)
		require.ErrorIs(t, err, c.class, c.name)
		other := ErrShardHash
		if c.class == ErrShardHash {
			other = ErrShardSet
		}
		require.NotErrorIs(t, err, other, c.name)
	}
	// A range shard resting on another sieve root.
	s1, _ := emitSieve(t, cert.Collatz, 10, 10, Options{})
	s2, _ := emitSieve(t, cert.Collatz, 10, 10, Options{})
	s2.Root[0] ^= 1
	rs := func(sr *Result, i int) []byte {
		var f memFile
		_, err := Range(context.Background(), &f, RangeParams{Sieve: sr.Header, SieveRoot: sr.Root, Lo: big.NewInt(1), Hi: big.NewInt(1 << 16), E: 12},
			RangeOptions{Shard: &Shard{I: i, N: 2}})
		require.NoError(t, err)
		return f.b
	}
	_, err = merged(t, in(rs(s1, 0), rs(s2, 1)))
	require.ErrorContains(t, err, "a shard of another certificate")
	require.ErrorIs(t, err, ErrShardSet)
}
