package main

import (
	"context"
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
		return nil, fmt.Errorf("-shard %s: want i/N, auto or auto/N", s)
	}
	i, err1 := strconv.Atoi(idx)
	n, err2 := strconv.Atoi(count)
	if err1 != nil || err2 != nil || n < 1 || i < 0 || i >= n {
		if idx+"/"+count != s { // taken from the scheduler's variables
			return nil, fmt.Errorf("-shard %s gives shard %s of %s: want i/N, whole numbers with 0 <= i < N", s, idx, count)
		}
		return nil, fmt.Errorf("-shard %s: want i/N, whole numbers with 0 <= i < N", s)
	}
	return &emit.Shard{I: i, N: n}, nil
}

func (c *cli) merge(ctx context.Context, args []string) int {
	fs := c.flags("merge")
	replace := fs.Bool("replace", false, "replace FILE if it exists (never a shard, a folder or a device)")
	out := fs.String("o", "", "write the merged certificate to `FILE`")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	if *out == "" || fs.NArg() == 0 {
		c.errorf("merge: give -o FILE and the shard files")
		return exitUsage
	}
	var inputs []input
	for _, path := range fs.Args() {
		inputs = append(inputs, input{"one of the shards", path})
	}
	if !c.outputOK("merge", *out, *replace, inputs) {
		return exitUsage
	}
	var in []emit.ShardInput
	for _, path := range fs.Args() {
		f, err := os.Open(path)
		if err != nil {
			c.errorf("merge: cannot read %s: %v", path, reason(err))
			return exitUsage
		}
		defer f.Close()
		in = append(in, emit.ShardInput{Name: path, R: f})
	}
	f, ok := c.createOutput(ctx, "merge", *out, *replace, inputs)
	if !ok {
		return exitUsage
	}
	_, root, err := emit.Merge(f, in)
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	switch {
	case err == nil:
		fmt.Fprintf(c.stdout, "%s: merged %d shards\n  root       %v\n", *out, len(in), root)
		// A shard that passed only an audit may carry a forged block:
		// merging checks hashes and completeness, never claims.
		fmt.Fprintf(c.stdout, "  checked    every shard's hashes, and that the shards are all of one certificate, each once; no claim is re-derived: 'descent check' the merged file\n")
		return exitOK
	case errors.Is(err, context.Canceled):
		c.errorf("merge: %v; nothing was written to %s", context.Cause(ctx), *out)
		return stopStatus(ctx)
	case errors.Is(err, emit.ErrShardHash):
		// A shard whose bytes do not match its own hashes: the one case
		// where merge finds a certificate wrong rather than the files
		// chosen.
		c.errorf("merge: %v", err)
		c.hintf("'descent check' on that shard says where; emit it again")
		return exitInvalid
	}
	c.errorf("merge: %v", err)
	if errors.Is(err, emit.ErrShardSet) {
		c.hintf("give every shard 0 to N-1 of one certificate, each once, as written by emit with -shard i/N")
	}
	return exitUsage
}
