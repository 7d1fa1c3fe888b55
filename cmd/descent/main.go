// Command descent emits, checks and shows certificates of computational
// verifications of the 3n+1 problem and its relatives.
//
//	descent emit sieve [-k K] [-j J] [-map 3n+1] [-cap N] [-workers N] -o FILE
//	descent emit range -sieve FILE -from LO -to HI [-block E] [-cap N] [-workers N] -o FILE
//	descent check [-json] [-root HEX] [-sieve FILE] [-sample N [-seed S]] [-workers N] FILE...
//	descent show [-json] FILE
//
// Exit status: 0 success (every certificate valid), 1 a certificate is
// invalid, 2 usage error or unreadable or malformed input.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

const (
	exitOK      = 0
	exitInvalid = 1
	exitUsage   = 2
)

const usage = `usage:
  descent emit sieve [-k K] [-j J] [-map 3n+1] [-cap N] [-shard i/N] [-workers N] -o FILE
  descent emit range -sieve FILE -from LO -to HI [-block E] [-cap N] [-shard i/N] [-workers N] -o FILE
  descent merge -o FILE SHARD...
  descent check [-json] [-root HEX] [-sieve FILE] [-sample N [-seed S]] [-shard i/N] [-workers N] FILE...
  descent check -part P -root HEX [-sieve FILE] FILE
  descent show [-json] FILE
  descent check -receipt OUT -sign NAME.key [check flags] FILE
  descent archive add [-sieve FILE] DIR FILE...
  descent archive verify [-sample N] [-reindex] DIR
  descent archive find [-json] [-map M] [-kind K] [-covers N] DIR
  descent key new [-name NAME] -o PATH
  descent receipt verify -key NAME.pub RECEIPT [FILE]

emit sieve  write a certificate for the residue-class sieve mod 2^K
emit range  write a certificate that every n in [LO, HI) drops or reaches a cycle
merge       put the shards of a certificate together, byte for byte as one run
check       re-derive every claim of certificates and verify their hashes
show        print the claim of a certificate in plain words
archive     file certificates under their roots, re-check them, find them
key         make a key pair that signs check receipts (check -receipt OUT -sign NAME.key)
receipt     verify a signed check receipt

Run 'descent COMMAND -h' for the flags of a command.
`

// cli carries the streams of one run; nothing is global.
type cli struct {
	stdout, stderr io.Writer
	stderrTTY      bool
}

func main() {
	c := &cli{stdout: os.Stdout, stderr: os.Stderr, stderrTTY: isTerminal(os.Stderr)}
	os.Exit(c.run(context.Background(), os.Args[1:]))
}

func (c *cli) run(ctx context.Context, args []string) int {
	if len(args) == 0 {
		fmt.Fprint(c.stderr, usage)
		return exitUsage
	}
	switch args[0] {
	case "emit":
		// An interrupted emit removes its partial output (and keeps a
		// range's journal); check and show write nothing and stop at once.
		ctx, stop := signal.NotifyContext(ctx, os.Interrupt, syscall.SIGTERM)
		defer stop()
		return c.emit(ctx, args[1:])
	case "check":
		return c.check(args[1:])
	case "merge":
		return c.merge(args[1:])
	case "show":
		return c.show(args[1:])
	case "archive":
		return c.archive(args[1:])
	case "key":
		return c.key(args[1:])
	case "receipt":
		return c.receipt(args[1:])
	case "help", "-h", "-help", "--help":
		fmt.Fprint(c.stdout, usage)
		return exitOK
	}
	c.errorf("unknown command %q", args[0])
	fmt.Fprint(c.stderr, "hint: run 'descent help'\n")
	return exitUsage
}

func (c *cli) errorf(format string, args ...any) {
	fmt.Fprintf(c.stderr, "descent: "+format+"\n", args...)
}

// flags makes the flag set of one subcommand; parse errors go to stderr
// with the subcommand's usage line.
func (c *cli) flags(name, synopsis string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard) // parse reports errors itself, prefixed
	fs.Usage = func() {
		fmt.Fprintf(c.stderr, "usage: descent %s\n", synopsis)
		fs.SetOutput(c.stderr)
		fs.PrintDefaults()
		fs.SetOutput(io.Discard)
	}
	return fs
}

// parse parses args and returns an exit status if the command should stop.
func (c *cli) parse(fs *flag.FlagSet, args []string) (int, bool) {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			fs.Usage()
			return exitOK, true
		}
		c.errorf("%s: %v", fs.Name(), err)
		fs.Usage()
		return exitUsage, true
	}
	return 0, false
}

// maxWorkers bounds -workers: more goroutines than this only cost memory.
const maxWorkers = 256

func (c *cli) workersOK(name string, w int) bool {
	if w < 0 || w > maxWorkers {
		c.errorf("%s: -workers %d: want 0 (all cores) to %d", name, w, maxWorkers)
		return false
	}
	return true
}
