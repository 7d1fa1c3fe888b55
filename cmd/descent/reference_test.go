package main

import (
	"bytes"
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// TestReferenceAgreesOnFreshCertificates emits certificates of every kind
// (a sieve, a sieve with joins, ranges with and without rules and on the
// sieve with joins, shards of a sieve and of a range) and checks each with
// the default checker and with the kernel alone (-reference), in full, as
// a share, as a part and as an audit: the JSON reports must be the same.
func TestReferenceAgreesOnFreshCertificates(t *testing.T) {
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	for _, args := range [][]string{
		{"emit", "sieve", "-k", "12", "-o", p("s.dcert")},
		{"emit", "sieve", "-k", "10", "-join", "-o", p("j.dcert")},
		{"emit", "sieve", "-k", "12", "-map", "3n-1", "-o", p("m.dcert")},
		{"emit", "sieve", "-k", "12", "-shard", "1/3", "-o", p("s-shard.dcert")},
		{"emit", "range", "-sieve", p("s.dcert"), "-from", "1", "-to", "2^17", "-block", "14", "-o", p("r.dcert")},
		{"emit", "range", "-sieve", p("s.dcert"), "-from", "2^40", "-to", "2^40+2^16", "-block", "13", "-rules", "auto", "-o", p("r-rules.dcert")},
		{"emit", "range", "-sieve", p("j.dcert"), "-from", "2^70", "-to", "2^70+2^15", "-rules", "auto", "-o", p("r-joins.dcert")},
		{"emit", "range", "-sieve", p("m.dcert"), "-from", "2", "-to", "20000", "-o", p("r-m.dcert")},
		{"emit", "range", "-sieve", p("s.dcert"), "-from", "1", "-to", "2^17", "-block", "14", "-shard", "2/3", "-o", p("r-shard.dcert")},
	} {
		code, _, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, "%v: %s", args, stderr)
	}
	root := func(file string) string {
		code, out, _ := runCLI("show", "-json", file)
		require.Equal(t, exitOK, code, out)
		var rep map[string]any
		require.NoError(t, json.Unmarshal([]byte(out), &rep))
		return rep["root"].(string)
	}
	for _, c := range [][]string{
		{p("s.dcert")}, {p("j.dcert")}, {p("s-shard.dcert")}, {"-shard", "1/2", p("s.dcert")},
		{"-part", "3", "-root", root(p("s.dcert")), p("s.dcert")},
		{"-sieve", p("s.dcert"), p("r.dcert")}, {"-sieve", p("s.dcert"), p("r-rules.dcert")},
		{"-sieve", p("j.dcert"), p("r-joins.dcert")}, {"-sieve", p("m.dcert"), p("r-m.dcert")},
		{"-sieve", p("s.dcert"), p("r-shard.dcert")}, {"-sieve", p("s.dcert"), "-shard", "0/2", p("r.dcert")},
		{"-sieve", p("s.dcert"), "-sample", "2", "-seed", "s", p("r.dcert")},
		{"-sieve", p("s.dcert"), "-part", "1/4", "-root", root(p("r.dcert")), p("r.dcert")},
	} {
		args := append([]string{"check", "-json"}, c...)
		code, fast, stderr := runCLI(args...)
		require.Equal(t, exitOK, code, "%v: %s%s", c, fast, stderr)
		code, ref, stderr := runCLI(append(args[:2:2], append([]string{"-reference"}, c...)...)...)
		require.Equal(t, exitOK, code, "%v -reference: %s%s", c, ref, stderr)
		if strings.Contains(strings.Join(c, " "), "-part") {
			// A part check says how many bytes it read: the same for both.
			require.Contains(t, fast, `"bytes_read"`)
		}
		require.True(t, bytes.Equal([]byte(fast), []byte(ref)), "%v:\ndefault   %s\nreference %s", c, fast, ref)
	}
}
