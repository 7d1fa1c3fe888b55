package main

import (
	"context"
	"errors"
	"fmt"
	"os"

	"descent/cert"
	"descent/emit"
)

func (c *cli) emitCensus(ctx context.Context, args []string) int {
	fs := c.flags("emit census")
	fromFlag := fs.String("from", "", "the first number `LO`, at least 1: decimal, or like 2^40, 5*2^60, 2^60+2^35")
	toFlag := fs.String("to", "", "the bound `HI`: the census covers [LO, HI), fewer than 2^64 numbers")
	mapFlag := fs.String("map", "3n+1", "the `map` T: n/2 for even n, (an+b)/2 for odd n, written an+b or an-b")
	block := fs.Int("block", 0, fmt.Sprintf("blocks of 2^`E` numbers, E from %d to %d (default %d)", cert.MinCensusBlockExp, cert.MaxCensusBlockExp, emit.DefaultCensusBlock))
	capFlag := fs.Uint("cap", emit.DefaultRangeCap, "step cap `N`: a number that does not reach the smallest member of a cycle within N steps of T, or reaches only one of a cycle of more than N steps, is undecided")
	ceiling := fs.Int("ceiling", 0, "ceiling `W` in bits: a number whose orbit reaches 2^W is undecided (default max(128, 2L+64), L the bits of HI-1)")
	workers := fs.Int("workers", 0, "`N` parallel workers (default 0: all cores)")
	shardFlag := fs.String("shard", "", "write only shard `i/N` of the blocks (or auto, auto/N: from SLURM_ARRAY_TASK_ID or JOB_COMPLETION_INDEX)")
	replace := fs.Bool("replace", false, "replace FILE if it exists (never a folder or a device)")
	out := fs.String("o", "", "write the certificate to `FILE`")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	set := given(fs)
	switch {
	case fs.NArg() > 0:
		c.errorf("emit census: unexpected argument %q: emit census reads no file", fs.Arg(0))
		return exitUsage
	case *fromFlag == "" || *toFlag == "" || *out == "":
		c.errorf("emit census: give -from LO, -to HI and -o FILE")
		return exitUsage
	case !c.workersOK("emit census", *workers):
		return exitUsage
	case set["cap"] && (*capFlag == 0 || *capFlag > cert.MaxCap):
		c.errorf("emit census: -cap %d: want 1 to %d", *capFlag, cert.MaxCap)
		c.hintf("leave -cap out for the default, %d steps", emit.DefaultRangeCap)
		return exitUsage
	case set["block"] && (*block < cert.MinCensusBlockExp || *block > cert.MaxCensusBlockExp):
		c.errorf("emit census: -block %d: want %d to %d", *block, cert.MinCensusBlockExp, cert.MaxCensusBlockExp)
		c.hintf("leave -block out for the default, blocks of 2^%d numbers", emit.DefaultCensusBlock)
		return exitUsage
	case set["ceiling"] && (*ceiling < cert.MinCeiling || *ceiling > cert.MaxCeiling):
		c.errorf("emit census: -ceiling %d: want %d to %d bits", *ceiling, cert.MinCeiling, cert.MaxCeiling)
		c.hintf("leave -ceiling out for the default")
		return exitUsage
	}
	m, err := cert.ParseMap(*mapFlag)
	if err != nil {
		c.errorf("emit census: -%v", err)
		return exitUsage
	}
	shard, err := parseShard(*shardFlag, os.Getenv)
	if err != nil {
		c.errorf("emit census: %v", err)
		return exitUsage
	}
	lo, err := parseNumber(*fromFlag)
	if err != nil {
		c.errorf("emit census: -from %v", err)
		return exitUsage
	}
	hi, err := parseNumber(*toFlag)
	if err != nil {
		c.errorf("emit census: -to %v", err)
		return exitUsage
	}
	p := emit.CensusParams{Map: m, Lo: lo, Hi: hi, E: *block, Cap: uint32(*capFlag), Ceiling: *ceiling}
	if !c.outputOK("emit census", *out, *replace, nil) {
		return exitUsage
	}
	if err := emit.NormalizeCensus(&p); err != nil {
		c.errorf("emit census: %v", err)
		return exitUsage
	}
	f, ok := c.createOutput(ctx, "emit census", *out, *replace, nil)
	if !ok {
		return exitUsage
	}
	journalPath := *out + ".partial"
	j, done, err := emit.OpenCensusJournal(journalPath, p, shard)
	if !c.journalOpened("emit census", journalPath, j, len(done), err) {
		f.abort()
		return exitUsage
	}
	progress, finish := c.blockProgress(len(done))
	res, err := emit.Census(ctx, f, p, emit.CensusOptions{Workers: *workers, Done: done, Block: j.Append, Progress: progress, Shard: shard})
	finish()
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	if err != nil {
		return c.runStopped(ctx, "emit census", j, *out, err)
	}
	if err := j.Remove(); err != nil && !errors.Is(err, os.ErrNotExist) {
		c.errorf("emit census: the certificate is written, but its journal %s could not be removed: %v", journalPath, reason(err))
	}
	if shard != nil {
		fmt.Fprintf(c.stdout, "%s: shard %d of %d of a census certificate, %d bytes\n  shard root %v\n", *out, shard.I, shard.N, res.Size, res.Root)
		return exitOK
	}
	fmt.Fprintf(c.stdout, "%s: census certificate, %d bytes\n  root       %v\n  claim      %s\n",
		*out, res.Size, res.Root, censusFactsFromHeader(res.Header, nil).summary())
	return exitOK
}
