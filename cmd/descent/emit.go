package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"

	"descent/cert"
	"descent/emit"
)

func (c *cli) emit(ctx context.Context, args []string) int {
	if len(args) > 0 && args[0] == "range" {
		return c.emitRange(ctx, args[1:])
	}
	if len(args) > 0 && args[0] == "census" {
		return c.emitCensus(ctx, args[1:])
	}
	if len(args) > 0 && (args[0] == "-h" || args[0] == "-help" || args[0] == "--help") {
		fmt.Fprintf(c.stdout, "usage: %s\n\nRun 'descent emit sieve -h', 'descent emit range -h' or 'descent emit census -h' for the flags.\n", strings.Join(synopsis("emit"), "\n       "))
		return exitOK
	}
	if len(args) == 0 || args[0] != "sieve" {
		c.errorf("emit: want a certificate kind first: descent emit sieve ..., descent emit range ... or descent emit census ...")
		return exitUsage
	}
	fs := c.flags("emit sieve")
	k := fs.Int("k", 24, "modulus exponent: the sieve covers the residues mod 2^`K` (1 to 64)")
	j := fs.Int("j", 0, "step budget `J`, 1 to K: classes may close at steps 1..J (default K)")
	mapFlag := fs.String("map", "3n+1", "the `map` T: n/2 for even n, (an+b)/2 for odd n, written an+b or an-b")
	capFlag := fs.Uint("cap", emit.DefaultCap, "step cap `N` for deciding the fate of each exception")
	ceiling := fs.Int("ceiling", 0, "ceiling `W` in bits: an exception whose orbit reaches 2^W before dropping is undecided (default max(128, 2L+64), L the bits of the exception bound)")
	join := fs.Bool("join", false, "also claim joins: survivors whose path meets that of a smaller residue after k steps (needs j = k)")
	workers := fs.Int("workers", 0, "`N` parallel chunk encoders (default 0: all cores)")
	shardFlag := fs.String("shard", "", "write only shard `i/N` (or auto, auto/N: from SLURM_ARRAY_TASK_ID or JOB_COMPLETION_INDEX)")
	replace := fs.Bool("replace", false, "replace FILE if it exists (never an input, a folder or a device)")
	out := fs.String("o", "", "write the certificate to `FILE`")
	if code, stop := c.parse(fs, args[1:]); stop {
		return code
	}
	set := given(fs)
	if fs.NArg() > 0 {
		c.errorf("emit sieve: unexpected argument %q: emit sieve reads no file", fs.Arg(0))
		return exitUsage
	}
	if !c.workersOK("emit sieve", *workers) {
		return exitUsage
	}
	shard, err := parseShard(*shardFlag, os.Getenv)
	if err != nil {
		c.errorf("emit sieve: %v", err)
		return exitUsage
	}
	if *out == "" {
		c.errorf("emit sieve: no output file; give -o FILE")
		return exitUsage
	}
	m, err := cert.ParseMap(*mapFlag)
	if err != nil {
		c.errorf("emit sieve: -%v", err)
		return exitUsage
	}
	if set["j"] && *j == 0 {
		c.errorf("emit sieve: -j 0: want 1 to k = %d", *k)
		c.hintf("leave -j out for j = k")
		return exitUsage
	}
	if !set["j"] {
		*j = *k
	}
	if *k < 1 || *k > cert.MaxK || *j < 1 || *j > *k {
		c.errorf("emit sieve: -k %d -j %d: want 1 <= j <= k <= %d", *k, *j, cert.MaxK)
		return exitUsage
	}
	if *join && *j != *k {
		c.errorf("emit sieve: -join needs j = k (here -j %d, -k %d): a join compares paths after all k steps", *j, *k)
		return exitUsage
	}
	if *capFlag < 1 || *capFlag > cert.MaxCap {
		c.errorf("emit sieve: -cap %d: want 1 to %d", *capFlag, cert.MaxCap)
		return exitUsage
	}
	if (set["ceiling"] || *ceiling != 0) && (*ceiling < cert.MinCeiling || *ceiling > cert.MaxCeiling) {
		c.errorf("emit sieve: -ceiling %d: want %d to %d bits", *ceiling, cert.MinCeiling, cert.MaxCeiling)
		c.hintf("leave -ceiling out for the default")
		return exitUsage
	}

	f, ok := c.createOutput(ctx, "emit sieve", *out, *replace, nil)
	if !ok {
		return exitUsage
	}
	update, finish := c.progress("chunks")
	var progress func(done, total int)
	if update != nil {
		progress = func(done, total int) { update(done, total, "") }
	}
	res, err := emit.Sieve(ctx, f, emit.SieveParams{Map: m, K: *k, J: *j, Cap: uint32(*capFlag), Ceiling: *ceiling, Joins: *join},
		emit.Options{Workers: *workers, Progress: progress, Shard: shard})
	finish()
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	if err != nil {
		if errors.Is(err, context.Canceled) {
			c.errorf("emit sieve: %v; nothing was written to %s", context.Cause(ctx), *out)
			return stopStatus(ctx)
		}
		c.errorf("emit sieve: %v", err)
		return exitUsage
	}
	h := res.Header
	if shard != nil {
		fmt.Fprintf(c.stdout, "%s: shard %d of %d of a sieve certificate, %d bytes\n  shard root %v\n",
			*out, shard.I, shard.N, res.Size, res.Root)
		return exitOK
	}
	fmt.Fprintf(c.stdout, "%s: sieve certificate, %d bytes\n  root       %v\n  claim      %s\n",
		*out, res.Size, res.Root, factsFromHeader(h).summary())
	return exitOK
}
