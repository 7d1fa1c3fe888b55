package main

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/cert"
)

func TestParseShard(t *testing.T) {
	env := func(vars map[string]string) func(string) string { return func(k string) string { return vars[k] } }
	for _, c := range []struct {
		flag string
		vars map[string]string
		i, n int
		bad  bool
	}{
		{flag: "2/5", i: 2, n: 5},
		{flag: "auto", vars: map[string]string{"SLURM_ARRAY_TASK_ID": "3", "SLURM_ARRAY_TASK_COUNT": "4"}, i: 3, n: 4},
		{flag: "auto/8", vars: map[string]string{"JOB_COMPLETION_INDEX": "7"}, i: 7, n: 8},
		{flag: "auto/8", vars: map[string]string{"SLURM_ARRAY_TASK_ID": "1"}, i: 1, n: 8},
		{flag: "auto", vars: map[string]string{"SLURM_ARRAY_TASK_ID": "3", "SLURM_ARRAY_TASK_COUNT": "4", "SLURM_ARRAY_TASK_MIN": "1"}, bad: true},
		{flag: "auto", vars: map[string]string{"JOB_COMPLETION_INDEX": "1"}, bad: true}, // N is not in the environment
		{flag: "auto", bad: true},
		{flag: "5/5", bad: true},
		{flag: "-1/5", bad: true},
		{flag: "x", bad: true},
	} {
		sh, err := parseShard(c.flag, env(c.vars))
		if c.bad {
			require.Error(t, err, "%s %v", c.flag, c.vars)
			continue
		}
		require.NoError(t, err, c.flag)
		require.Equal(t, [2]int{c.i, c.n}, [2]int{sh.I, sh.N}, c.flag)
	}
}

// auditPathLen counts the siblings on the audit path of leaf i of n.
func auditPathLen(i, n int) int {
	k := 0
	for n > 1 {
		if i^1 < n {
			k++
		}
		i, n = i/2, (n+1)/2
	}
	return k
}

func TestPartCheckReadsOnlyItsPart(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "k30.dcert")
	code, _, stderr := runCLI("emit", "sieve", "-k", "30", "-o", path)
	require.Equal(t, exitOK, code, stderr)
	_, stdout, _ := runCLI("check", "-json", path)
	var whole map[string]any
	require.NoError(t, jsonUnmarshal(stdout, &whole))
	root := whole["root"].(string)
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	rd, err := cert.NewReader(bytes.NewReader(b))
	require.NoError(t, err)
	records := rd.Layout.Records
	for _, p := range []int{0, 1, records / 2, records - 1} {
		code, stdout, _ := runCLI("check", "-json", "-part", itoa(p), "-root", root, path)
		require.Equal(t, exitOK, code, stdout)
		var rep map[string]any
		require.NoError(t, jsonUnmarshal(stdout, &rep))
		// At most: the header, two audit paths (the header's and the
		// part's), the part's two offsets, and the part itself.
		recLen := rd.Offs[p+1] - rd.Offs[p]
		bound := int64(len(rd.Header)) + 32*int64(auditPathLen(0, records+1)+auditPathLen(p+1, records+1)) + 16 + recLen
		got := int64(rep["bytes_read"].(float64))
		require.LessOrEqual(t, got, bound, "part %d of %d: read %d bytes", p, records, got)
		require.Less(t, got, int64(len(b))/10, "part %d read a tenth of the file", p)
	}

	// A swapped chunk, an altered audit path, a chunk from another
	// certificate, and another root: each fails with the reason.
	swapped := bytes.Clone(b)
	a, e := rd.Offs[3], rd.Offs[4]
	a2, e2 := rd.Offs[4], rd.Offs[5]
	if e-a == e2-a2 {
		copy(swapped[a:], b[a2:e2])
		copy(swapped[a2:], b[a:e])
	} else {
		swapped[a+20] ^= 1 // a changed chunk, if no two neighbours share a size
	}
	altered := bytes.Clone(b)
	altered[rd.Layout.NodeOff(1, 0)] ^= 1 // a sibling on the path of record 0 or 1
	otherPath := filepath.Join(dir, "other.dcert")
	code, _, _ = runCLI("emit", "sieve", "-k", "30", "-map", "3n-1", "-o", otherPath)
	require.Equal(t, exitOK, code)
	other, err := os.ReadFile(otherPath)
	require.NoError(t, err)
	for name, c := range map[string]struct {
		file   []byte
		part   string
		root   string
		reason string
	}{
		"a swapped chunk":          {swapped, "3", root, "audit"},
		"an altered audit path":    {altered, "1", root, "audit"},
		"another certificate":      {other, "2", root, "audit"},
		"a root that is not it":    {b, "2", "00" + root[2:], "audit"},
		"a record beyond the file": {b, itoa(records), root, "part"},
	} {
		p := filepath.Join(dir, "bad.dcert")
		require.NoError(t, os.WriteFile(p, c.file, 0o644))
		code, stdout, _ := runCLI("check", "-json", "-part", c.part, "-root", c.root, p)
		require.NotEqual(t, exitOK, code, name)
		var rep map[string]any
		require.NoError(t, jsonUnmarshal(stdout, &rep), stdout)
		require.Equal(t, c.reason, rep["reason"], "%s: %v", name, rep["error"])
	}
}

func TestShardsCheckAloneAndMerge(t *testing.T) {
	dir := t.TempDir()
	whole := filepath.Join(dir, "whole.dcert")
	require.Equal(t, exitOK, first(runCLI("emit", "sieve", "-k", "20", "-o", whole)))
	var shards []string
	for i := 3; i >= 0; i-- { // any order
		p := filepath.Join(dir, "shard"+itoa(i)+".dcert")
		code, _, stderr := runCLI("emit", "sieve", "-k", "20", "-shard", itoa(i)+"/4", "-o", p)
		require.Equal(t, exitOK, code, stderr)
		require.Equal(t, exitOK, first(runCLI("check", p)), "shard %d checks alone", i)
		shards = append(shards, p)
	}
	merged := filepath.Join(dir, "merged.dcert")
	require.Equal(t, exitOK, first(runCLI(append([]string{"merge", "-o", merged}, shards...)...)))
	w, _ := os.ReadFile(whole)
	m, _ := os.ReadFile(merged)
	require.Equal(t, w, m)

	// A damaged shard fails its own check and is refused by merge (exit 1).
	bad, _ := os.ReadFile(shards[1])
	bad[len(bad)-1] ^= 1
	require.NoError(t, os.WriteFile(shards[1], bad, 0o644))
	require.Equal(t, exitInvalid, first(runCLI("check", shards[1])))
	code, _, stderr := runCLI(append([]string{"merge", "-o", merged + "2"}, shards...)...)
	require.Equal(t, exitInvalid, code)
	require.Contains(t, stderr, "does not match its hash")
	_, err := os.Stat(merged + "2")
	require.True(t, os.IsNotExist(err))

	// A shard header saying it is another shard: malformed, exit 2.
	odd, _ := os.ReadFile(shards[0])
	binary.BigEndian.PutUint32(odd[cert.PreambleSize+1:], 0)
	require.NoError(t, os.WriteFile(shards[0], odd, 0o644))
	require.Equal(t, exitUsage, first(runCLI("check", shards[0])))
}

func first(code int, _, _ string) int { return code }

func itoa(i int) string { return strconv.Itoa(i) }

func jsonUnmarshal(s string, v any) error { return json.Unmarshal([]byte(s), v) }
