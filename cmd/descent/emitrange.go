package main

import (
	"context"
	"errors"
	"fmt"
	"math/big"
	"os"
	"time"

	"descent/cert"
	"descent/emit"
)

func (c *cli) emitRange(ctx context.Context, args []string) int {
	fs := c.flags("emit range", "emit range -sieve FILE -from LO -to HI [-block E] [-cap N] [-ceiling W] [-rules auto] -o FILE")
	sievePath := fs.String("sieve", "", "the sieve certificate `FILE` the range rests on")
	fromFlag := fs.String("from", "1", "the first number `LO`: decimal, or like 2^40, 5*2^60, 2^60+2^35")
	toFlag := fs.String("to", "", "the bound `HI`: the range is [LO, HI)")
	block := fs.Int("block", 0, "blocks of 2^`E` numbers (default: the sieve's k + 4)")
	capFlag := fs.Uint("cap", emit.DefaultRangeCap, "step `cap`: a number not decided within it is reported undecided")
	ceiling := fs.Int("ceiling", 0, "ceiling `W` in bits: a number whose orbit reaches 2^W before dropping is reported undecided (default max(128, 2L+64), L the bits of HI-1, raised to what the sieve's k needs)")
	rulesFlag := fs.String("rules", "none", "predecessor rules: `auto` (justify the numbers of survivor classes that have a smaller predecessor, found for the map) or none")
	workers := fs.Int("workers", 0, "parallel workers (default: all cores)")
	shardFlag := fs.String("shard", "", "write only shard `i/N` of the blocks (or auto, auto/N: from SLURM_ARRAY_TASK_ID or JOB_COMPLETION_INDEX)")
	out := fs.String("o", "", "write the certificate to `FILE`")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	switch {
	case fs.NArg() > 0:
		c.errorf("emit range: unexpected argument %q", fs.Arg(0))
		return exitUsage
	case *sievePath == "" || *toFlag == "" || *out == "":
		c.errorf("emit range: give -sieve FILE, -to HI and -o FILE")
		return exitUsage
	case !c.workersOK("emit range", *workers):
		return exitUsage
	case *capFlag > cert.MaxCap:
		c.errorf("emit range: -cap %d: at most %d", *capFlag, cert.MaxCap)
		return exitUsage
	case *ceiling < 0 || *ceiling > cert.MaxCeiling:
		c.errorf("emit range: -ceiling %d: want %d to %d bits", *ceiling, cert.MinCeiling, cert.MaxCeiling)
		return exitUsage
	case *rulesFlag != "auto" && *rulesFlag != "none":
		c.errorf("emit range: -rules %q: want auto or none", *rulesFlag)
		return exitUsage
	}
	shard, err := parseShard(*shardFlag, os.Getenv)
	if err != nil {
		c.errorf("emit range: %v", err)
		return exitUsage
	}
	lo, err := parseNumber(*fromFlag)
	if err == nil {
		var hi *big.Int
		if hi, err = parseNumber(*toFlag); err == nil {
			return c.runRange(ctx, *sievePath, lo, hi, *block, uint32(*capFlag), *ceiling, *rulesFlag == "auto", *workers, shard, *out)
		}
	}
	c.errorf("emit range: %v", err)
	return exitUsage
}

func (c *cli) runRange(ctx context.Context, sievePath string, lo, hi *big.Int, block int, capSteps uint32, ceiling int, rules bool, workers int, shard *emit.Shard, out string) int {
	sh, root, err := readHeader(sievePath)
	if err != nil {
		c.errorf("emit range: %s: %v", sievePath, err)
		return exitUsage
	}
	p := emit.RangeParams{Sieve: sh, SieveRoot: root, Lo: lo, Hi: hi, E: block, Cap: capSteps, Ceiling: ceiling}
	if rules {
		p.Rules = emit.AutoRules(sh.Map)
	}
	if err := emit.NormalizeRange(&p); err != nil {
		c.errorf("emit range: %v", err)
		return exitUsage
	}
	if err := emit.CheckSieveRoot(ctx, sh, root, workers); err != nil {
		c.errorf("emit range: %s: %v", sievePath, err)
		return exitUsage
	}
	journalPath := out + ".partial"
	j, done, err := emit.OpenJournal(journalPath, p, shard)
	if err != nil {
		c.errorf("emit range: %v", err)
		return exitUsage
	}
	if len(done) > 0 {
		c.errorf("emit range: resuming after %d completed blocks from %s", len(done), journalPath)
	}
	f, err := createAtomic(out)
	if err != nil {
		j.Close()
		c.errorf("emit range: %v", err)
		return exitUsage
	}
	start, skipped := time.Now(), new(big.Int)
	update, finish := c.progress("blocks")
	var progress func(done, total int, numbers *big.Int)
	if update != nil {
		progress = func(d, total int, numbers *big.Int) {
			if d <= len(done) {
				skipped.Set(numbers)
			}
			rate, _ := new(big.Float).Quo(new(big.Float).SetInt(new(big.Int).Sub(numbers, skipped)), big.NewFloat(time.Since(start).Seconds()+1e-9)).Float64()
			update(d, total, fmt.Sprintf("blocks, %.3g numbers/s", rate))
		}
	}
	res, err := emit.Range(ctx, f, p, emit.RangeOptions{Workers: workers, Done: done, Block: j.Append, Progress: progress, Shard: shard})
	finish()
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	if err != nil {
		j.Close()
		if errors.Is(err, context.Canceled) {
			c.errorf("emit range: interrupted; %s was not written, and the run resumes from %s", out, journalPath)
		} else {
			c.errorf("emit range: %s: %v", out, err)
		}
		return exitUsage
	}
	if err := j.Remove(); err != nil && !errors.Is(err, os.ErrNotExist) {
		c.errorf("emit range: %v", err)
	}
	if shard != nil {
		fmt.Fprintf(c.stdout, "%s: shard %d of %d of a range certificate, %d bytes\n  shard root %v\n",
			out, shard.I, shard.N, res.Size, res.Root)
		return exitOK
	}
	fmt.Fprintf(c.stdout, "%s: range certificate, %d bytes\n  root       %v\n  claim      %s\n",
		out, res.Size, res.Root, rangeFactsFromHeader(res.Header).summary())
	return exitOK
}
