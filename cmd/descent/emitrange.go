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

// rangeRun is what one emit range needs, from its flags.
type rangeRun struct {
	sievePath string
	lo, hi    *big.Int
	block     int
	capSteps  uint32
	ceiling   int
	rules     bool
	workers   int
	shard     *emit.Shard
	out       string
	replace   bool
}

func (c *cli) emitRange(ctx context.Context, args []string) int {
	fs := c.flags("emit range")
	sievePath := fs.String("sieve", "", "the sieve certificate `FILE` the range rests on")
	fromFlag := fs.String("from", "1", "the first number `LO`: decimal, or like 2^40, 5*2^60, 2^60+2^35")
	toFlag := fs.String("to", "", "the bound `HI`: the range is [LO, HI)")
	block := fs.Int("block", 0, "blocks of 2^`E` numbers, E at least the sieve's k (default k + 4)")
	capFlag := fs.Uint("cap", emit.DefaultRangeCap, "step cap `N`: a number not decided within it is reported undecided")
	ceiling := fs.Int("ceiling", 0, "ceiling `W` in bits: a number whose orbit reaches 2^W before dropping is reported undecided (default max(128, 2L+64), L the bits of HI-1, raised to what the sieve's k needs)")
	rulesFlag := fs.String("rules", "none", "predecessor rules: `auto` (justify the numbers of survivor classes that have a smaller predecessor, found for the map) or none")
	workers := fs.Int("workers", 0, "`N` parallel workers (default 0: all cores)")
	shardFlag := fs.String("shard", "", "write only shard `i/N` of the blocks (or auto, auto/N: from SLURM_ARRAY_TASK_ID or JOB_COMPLETION_INDEX)")
	replace := fs.Bool("replace", false, "replace FILE if it exists (never an input, a folder or a device)")
	out := fs.String("o", "", "write the certificate to `FILE`")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	set := given(fs)
	switch {
	case fs.NArg() > 0:
		c.errorf("emit range: unexpected argument %q: give the sieve with -sieve FILE", fs.Arg(0))
		return exitUsage
	case *sievePath == "" || *toFlag == "" || *out == "":
		c.errorf("emit range: give -sieve FILE, -to HI and -o FILE")
		return exitUsage
	case !c.workersOK("emit range", *workers):
		return exitUsage
	case set["cap"] && *capFlag == 0:
		c.errorf("emit range: -cap 0: want more than the sieve's k, at most %d", cert.MaxCap)
		c.hintf("leave -cap out for the default, %d steps", emit.DefaultRangeCap)
		return exitUsage
	case *capFlag > cert.MaxCap:
		c.errorf("emit range: -cap %d: at most %d", *capFlag, cert.MaxCap)
		return exitUsage
	case set["block"] && *block == 0:
		c.errorf("emit range: -block 0: want the sieve's k to %d", cert.MaxBlockExp)
		c.hintf("leave -block out for the default, the sieve's k + 4")
		return exitUsage
	case set["ceiling"] && (*ceiling < cert.MinCeiling || *ceiling > cert.MaxCeiling):
		c.errorf("emit range: -ceiling %d: want %d to %d bits", *ceiling, cert.MinCeiling, cert.MaxCeiling)
		c.hintf("leave -ceiling out for the default")
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
	if err != nil {
		c.errorf("emit range: -from %v", err)
		return exitUsage
	}
	hi, err := parseNumber(*toFlag)
	if err != nil {
		c.errorf("emit range: -to %v", err)
		return exitUsage
	}
	return c.runRange(ctx, rangeRun{sievePath: *sievePath, lo: lo, hi: hi, block: *block, capSteps: uint32(*capFlag), ceiling: *ceiling,
		rules: *rulesFlag == "auto", workers: *workers, shard: shard, out: *out, replace: *replace})
}

// readSieve reads the header of the sieve a range rests on, naming what
// the file is if it is no sieve certificate.
func (c *cli) readSieve(path string) (*cert.SieveHeader, cert.Hash, bool) {
	kind, _, ok, err := certKind(path)
	if err != nil {
		c.errorf("emit range: -sieve %s: cannot read it: %v", path, reason(err))
		return nil, cert.Hash{}, false
	}
	if ok && (kind == cert.KindRange || kind == cert.KindShard) {
		what := "a range certificate"
		if kind == cert.KindShard {
			what = "a shard"
		}
		c.errorf("emit range: -sieve %s is %s, not a sieve certificate", path, what)
		c.hintf("give the sieve certificate written by 'descent emit sieve'; shards of one are merged first")
		return nil, cert.Hash{}, false
	}
	sh, root, err := readHeader(path)
	if err != nil {
		c.errorf("emit range: -sieve %s: %v", path, reason(err))
		if errors.Is(err, cert.ErrHashMismatch) {
			c.hintf("the file is damaged or was altered; 'descent check %s' says where", path)
		}
		return nil, cert.Hash{}, false
	}
	return sh, root, true
}

func (c *cli) runRange(ctx context.Context, r rangeRun) int {
	inputs := []input{{"the -sieve file", r.sievePath}}
	if !c.outputOK("emit range", r.out, r.replace, inputs) { // before the sieve is even read
		return exitUsage
	}
	sh, root, ok := c.readSieve(r.sievePath)
	if !ok {
		return exitUsage
	}
	switch {
	case r.capSteps != 0 && r.capSteps <= uint32(sh.K):
		c.errorf("emit range: -cap %d: want more than the sieve's k = %d (and at most %d)", r.capSteps, sh.K, cert.MaxCap)
		return exitUsage
	case r.block != 0 && (r.block < sh.K || r.block > cert.MaxBlockExp):
		c.errorf("emit range: -block %d: want the sieve's k = %d to %d", r.block, sh.K, cert.MaxBlockExp)
		return exitUsage
	}
	p := emit.RangeParams{Sieve: sh, SieveRoot: root, Lo: r.lo, Hi: r.hi, E: r.block, Cap: r.capSteps, Ceiling: r.ceiling}
	if r.rules {
		p.Rules = emit.AutoRules(sh.Map)
	}
	if err := emit.NormalizeRange(&p); err != nil {
		c.errorf("emit range: %v", err)
		return exitUsage
	}
	f, ok := c.createOutput(ctx, "emit range", r.out, r.replace, inputs)
	if !ok {
		return exitUsage
	}
	journalPath := r.out + ".partial"
	j, done, err := emit.OpenJournal(journalPath, p, r.shard)
	if !c.journalOpened("emit range", journalPath, j, len(done), err) {
		f.abort()
		return exitUsage
	}
	checked, err := emit.CheckSieveRoot(ctx, sh, root, r.workers)
	if err != nil {
		f.abort()
		return c.runStopped(ctx, "emit range", j, r.out, fmt.Errorf("-sieve %s: %w", r.sievePath, err))
	}
	progress, finish := c.blockProgress(len(done))
	res, err := emit.Range(ctx, f, p, emit.RangeOptions{Workers: r.workers, Done: done, Block: j.Append, Progress: progress, Shard: r.shard, Sieve: checked})
	finish()
	if err == nil {
		err = f.commit()
	} else {
		f.abort()
	}
	if err != nil {
		return c.runStopped(ctx, "emit range", j, r.out, err)
	}
	if err := j.Remove(); err != nil && !errors.Is(err, os.ErrNotExist) {
		c.errorf("emit range: the certificate is written, but its journal %s could not be removed: %v", journalPath, reason(err))
	}
	if r.shard != nil {
		fmt.Fprintf(c.stdout, "%s: shard %d of %d of a range certificate, %d bytes\n  shard root %v\n",
			r.out, r.shard.I, r.shard.N, res.Size, res.Root)
		return exitOK
	}
	fmt.Fprintf(c.stdout, "%s: range certificate, %d bytes\n  root       %v\n  claim      %s\n",
		r.out, res.Size, res.Root, rangeFactsFromHeader(res.Header).summary())
	return exitOK
}

// blockProgress makes the progress bar of a run over blocks, the first
// resumed of them taken from a journal: it shows the blocks done and the
// rate of the numbers computed by this run. The progress function is nil
// when stderr is no terminal.
func (c *cli) blockProgress(resumed int) (func(done, total int, numbers *big.Int), func()) {
	start, skipped := time.Now(), new(big.Int)
	update, finish := c.progress("blocks")
	if update == nil {
		return nil, finish
	}
	return func(d, total int, numbers *big.Int) {
		if d <= resumed {
			skipped.Set(numbers)
		}
		rate, _ := new(big.Float).Quo(new(big.Float).SetInt(new(big.Int).Sub(numbers, skipped)), big.NewFloat(time.Since(start).Seconds()+1e-9)).Float64()
		update(d, total, fmt.Sprintf("blocks, %.3g numbers/s", rate))
	}, finish
}

// runStopped reports a range or census run (command cmd) that stopped
// with err and keeps or removes its journal: an interrupted run's blocks
// are kept for the same command; a failed run's are kept too, marked so
// that a run with other parameters removes them instead of refusing to
// start.
func (c *cli) runStopped(ctx context.Context, cmd string, j *emit.Journal, out string, err error) int {
	n := j.Blocks()
	if errors.Is(err, context.Canceled) {
		c.errorf("%s: %v; nothing was written to %s", cmd, context.Cause(ctx), out)
		if n == 0 {
			j.Remove()
		} else {
			j.Close()
			c.hintf("%s keeps the %d completed blocks: the same command resumes from them", j.Name(), n)
		}
		return stopStatus(ctx)
	}
	c.errorf("%s: %v", cmd, err)
	if n > 0 {
		c.hintf("%s keeps the %d completed blocks: the same command resumes from them; a run with other parameters removes them", j.Name(), n)
	}
	j.Fail(err.Error())
	return exitUsage
}

// journalOpened says on stderr what opening the journal at path of a run
// (command cmd) found: why it cannot be used (false: the run stops), an
// earlier failed run's journal removed, or completed blocks to resume.
func (c *cli) journalOpened(cmd, path string, j *emit.Journal, done int, err error) bool {
	if err != nil {
		c.journalError(cmd, path, err)
		return false
	}
	if j.Discarded != "" {
		c.errorf("%s: removed %s, the journal of an earlier run with other parameters that failed (%s)", cmd, path, j.Discarded)
	}
	if done > 0 {
		if j.Failed != "" {
			c.errorf("%s: resuming after %d completed blocks from %s; the run that wrote them failed: %s", cmd, done, path, j.Failed)
		} else {
			c.errorf("%s: resuming after %d completed blocks from %s", cmd, done, path)
		}
	}
	return true
}

// journalError explains why a range or census run (command cmd) cannot
// use its journal.
func (c *cli) journalError(cmd, path string, err error) {
	var conflict *emit.JournalConflictError
	switch {
	case errors.As(err, &conflict) && conflict.Old:
		c.errorf("%s: %v", cmd, err)
		c.hintf("finish that run with the version of descent that began it, or remove %s to start afresh", path)
	case errors.As(err, &conflict):
		c.errorf("%s: %v", cmd, err)
		c.hintf("run that command again to resume it, or remove %s (or give another -o) to start this one", path)
	case errors.Is(err, emit.ErrNotJournal):
		c.errorf("%s: %s, where this run keeps its journal, is not a descent journal", cmd, path)
		c.hintf("remove it, or give another -o")
	case errors.Is(err, emit.ErrBusy):
		c.errorf("%s: another descent run is using %s now", cmd, path)
		c.hintf("wait for it to finish, or give another -o")
	default:
		c.errorf("%s: the journal %s: %v", cmd, path, reason(err))
	}
}
