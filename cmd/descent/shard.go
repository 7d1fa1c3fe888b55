package main

import (
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"

	"descent/emit"
)

// parseShard reads -shard: "i/N"; "auto", which takes i and N from a
// Slurm job array (SLURM_ARRAY_TASK_ID, SLURM_ARRAY_TASK_COUNT); or
// "auto/N", which takes i from SLURM_ARRAY_TASK_ID or, for a Kubernetes
// Indexed Job, JOB_COMPLETION_INDEX.
func parseShard(s string, env func(string) string) (*emit.Shard, error) {
	if s == "" {
		return nil, nil
	}
	idx, count, ok := strings.Cut(s, "/")
	if idx == "auto" {
		switch {
		case env("SLURM_ARRAY_TASK_ID") != "":
			idx = env("SLURM_ARRAY_TASK_ID")
			if !ok {
				count, ok = env("SLURM_ARRAY_TASK_COUNT"), true
				if min := env("SLURM_ARRAY_TASK_MIN"); min != "" && min != "0" {
					return nil, fmt.Errorf("-shard auto: the job array starts at %s; use --array=0-(N-1)", min)
				}
			}
		case env("JOB_COMPLETION_INDEX") != "" && ok:
			idx = env("JOB_COMPLETION_INDEX")
		default:
			return nil, fmt.Errorf("-shard %s: neither SLURM_ARRAY_TASK_ID (with SLURM_ARRAY_TASK_COUNT) nor, with auto/N, JOB_COMPLETION_INDEX is set", s)
		}
	}
	if !ok {
		return nil, fmt.Errorf("-shard %q: want i/N, auto or auto/N", s)
	}
	i, err1 := strconv.Atoi(idx)
	n, err2 := strconv.Atoi(count)
	if err1 != nil || err2 != nil || n < 1 || i < 0 || i >= n {
		return nil, fmt.Errorf("-shard %q (shard %q of %q): want 0 <= i < N", s, idx, count)
	}
	return &emit.Shard{I: i, N: n}, nil
}

func (c *cli) merge(args []string) int {
	fs := c.flags("merge", "merge -o FILE SHARD...")
	out := fs.String("o", "", "write the merged certificate to `FILE`")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	if *out == "" || fs.NArg() == 0 {
		c.errorf("merge: give -o FILE and the shard files")
		return exitUsage
	}
	var in []emit.ShardInput
	for _, path := range fs.Args() {
		f, err := os.Open(path)
		if err != nil {
			c.errorf("merge: %v", err)
			return exitUsage
		}
		defer f.Close()
		in = append(in, emit.ShardInput{Name: path, R: f})
	}
	f, err := createAtomic(*out)
	if err != nil {
		c.errorf("merge: %v", err)
		return exitUsage
	}
	_, root, err := emit.Merge(f, in)
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	if err != nil {
		c.errorf("merge: %v", err)
		if errors.Is(err, emit.ErrShards) {
			return exitInvalid
		}
		return exitUsage
	}
	fmt.Fprintf(c.stdout, "%s: merged %d shards\n  root       %v\n", *out, len(in), root)
	// A shard that passed only an audit may carry a forged block: merging
	// checks hashes and completeness, never claims.
	fmt.Fprintf(c.stdout, "  checked    every shard's hashes, and that the shards are all of one certificate, each once; no claim is re-derived: 'descent check' the merged file\n")
	return exitOK
}
