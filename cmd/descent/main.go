// Command descent emits, checks and shows certificates of computational
// verifications of the 3n+1 problem and its relatives.
//
//	descent emit sieve [-k K] [-j J] [-map 3n+1] [-cap N] [-ceiling W] [-join] [-shard i/N] [-workers N] [-replace] -o FILE
//	descent emit range -sieve FILE [-from LO] -to HI [-block E] [-cap N] [-ceiling W] [-rules auto] [-shard i/N] [-workers N] [-replace] -o FILE
//	descent emit census -from LO -to HI [-map 3n+1] [-block E] [-cap N] [-ceiling W] [-shard i/N] [-workers N] [-replace] -o FILE
//	descent merge [-replace] -o FILE SHARD...
//	descent check [-json] [-root HEX] [-sieve FILE] [-sample N [-seed S]] [-budget STEPS] [-shard i/N] [-workers N] [-reference] FILE...
//	descent check -part P -root HEX [-json] [-sieve FILE] FILE
//	descent show [-json] FILE
//	descent check -receipt OUT -sign NAME.key [check flags] FILE
//	descent report [-sieve FILE] [-sample N [-seed S]] [-workers N] [-replace] -o FILE CERT...
//	descent archive add [-sieve FILE] DIR FILE...
//	descent archive verify [-sample N] [-reindex] DIR
//	descent archive find [-json] [-map M] [-kind K] [-covers N] DIR
//	descent key new [-name NAME] -o PATH
//	descent receipt verify -key NAME.pub RECEIPT [FILE]
//	descent version [-json]
//	descent help [COMMAND]
//
// Flags may come before or after the file names; "--" ends them. -o never
// names an input, a directory or a device, and replaces an existing file
// only with -replace.
//
// Exit status: 0 success (every certificate valid), 1 a certificate is
// invalid (a hash or a claim is wrong), 2 usage error or unreadable or
// malformed input, 130 interrupted (SIGINT), 143 terminated (SIGTERM).
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"regexp"
	"strings"
	"syscall"
)

const (
	exitOK      = 0
	exitInvalid = 1
	exitUsage   = 2
	// A run stopped by a signal exits with 128 + the signal's number, as
	// a shell reports a process that a signal ended: 130 for SIGINT
	// (Ctrl-C), 143 for SIGTERM.
	exitInterrupted = 128 + 2
	exitTerminated  = 128 + 15
)

// usage is the one place that lists the commands and their flags: the
// package doc, the README and each command's -h repeat its lines, and
// TestUsageListsEveryFlag keeps them all equal to the flags defined.
const usage = `usage:
  descent emit sieve [-k K] [-j J] [-map 3n+1] [-cap N] [-ceiling W] [-join] [-shard i/N] [-workers N] [-replace] -o FILE
  descent emit range -sieve FILE [-from LO] -to HI [-block E] [-cap N] [-ceiling W] [-rules auto] [-shard i/N] [-workers N] [-replace] -o FILE
  descent emit census -from LO -to HI [-map 3n+1] [-block E] [-cap N] [-ceiling W] [-shard i/N] [-workers N] [-replace] -o FILE
  descent merge [-replace] -o FILE SHARD...
  descent check [-json] [-root HEX] [-sieve FILE] [-sample N [-seed S]] [-budget STEPS] [-shard i/N] [-workers N] [-reference] FILE...
  descent check -part P -root HEX [-json] [-sieve FILE] FILE
  descent show [-json] FILE
  descent check -receipt OUT -sign NAME.key [check flags] FILE
  descent report [-sieve FILE] [-sample N [-seed S]] [-workers N] [-replace] -o FILE CERT...
  descent archive add [-sieve FILE] DIR FILE...
  descent archive verify [-sample N] [-reindex] DIR
  descent archive find [-json] [-map M] [-kind K] [-covers N] DIR
  descent key new [-name NAME] -o PATH
  descent receipt verify -key NAME.pub RECEIPT [FILE]
  descent version [-json]
  descent help [COMMAND]

emit sieve  write a certificate for the residue-class sieve mod 2^K
emit range  write a certificate that every n in [LO, HI) drops or reaches a cycle
emit census write a certificate of the delays, heights and records of [LO, HI)
merge       put the shards of a certificate together, byte for byte as one run
check       re-derive every claim of certificates and verify their hashes
show        print the claim of a certificate in plain words
report      check certificates and write one HTML page of their claims and plots
archive     file certificates under their roots, re-check them, find them
key         make a key pair that signs check receipts (check -receipt OUT -sign NAME.key)
receipt     verify a signed check receipt
version     print the module version, VCS revision and Go version

Flags may come before or after the file names; -- ends the flags. -o never
names an input, a directory or a device, and replaces an existing file only
with -replace.

Exit status: 0 success (every certificate valid), 1 a certificate is invalid
(a hash or a claim is wrong), 2 a usage error or an unreadable or malformed
file, 130 interrupted (SIGINT, Ctrl-C), 143 terminated (SIGTERM).

Run 'descent COMMAND -h' for the flags of a command.
`

// cli carries the streams of one run; nothing is global.
type cli struct {
	stdout, stderr io.Writer
	stderrTTY      bool
}

func main() {
	c := &cli{stdout: os.Stdout, stderr: os.Stderr, stderrTTY: isTerminal(os.Stderr)}
	ctx, cancel := context.WithCancelCause(context.Background())
	sigs := make(chan os.Signal, 2)
	for _, s := range []os.Signal{os.Interrupt, syscall.SIGTERM} {
		if !signal.Ignored(s) { // keep nohup and background jobs as they were started
			signal.Notify(sigs, s)
		}
	}
	go func() {
		s := <-sigs
		cancel(interrupted{s})
		// A second signal stops at once; what the first one would have
		// cleaned up is found and removed by the next run.
		s = <-sigs
		os.Exit(interrupted{s}.status())
	}()
	os.Exit(c.run(ctx, os.Args[1:]))
}

// interrupted is the cause of a run's context canceled by a signal.
type interrupted struct{ sig os.Signal }

func (e interrupted) Error() string {
	if e.sig == syscall.SIGTERM {
		return "terminated (SIGTERM)"
	}
	return "interrupted (SIGINT)"
}

func (e interrupted) status() int {
	if e.sig == syscall.SIGTERM {
		return exitTerminated
	}
	return exitInterrupted
}

// stopStatus is the exit status of a run stopped because ctx was canceled.
func stopStatus(ctx context.Context) int {
	var in interrupted
	if errors.As(context.Cause(ctx), &in) {
		return in.status()
	}
	return exitInterrupted
}

func (c *cli) run(ctx context.Context, args []string) int {
	if len(args) == 0 {
		fmt.Fprint(c.stderr, usage)
		return exitUsage
	}
	switch args[0] {
	case "emit":
		// emit and merge stop when ctx is canceled, removing their
		// temporary file (a range keeps its journal).
		return c.emit(ctx, args[1:])
	case "merge":
		return c.merge(ctx, args[1:])
	case "check":
		// check and show write nothing: they stop at once.
		return c.untilStopped(ctx, "check", func() int { return c.check(args[1:]) })
	case "show":
		return c.untilStopped(ctx, "show", func() int { return c.show(args[1:]) })
	case "report":
		return c.untilStopped(ctx, "report", func() int { return c.report(ctx, args[1:]) })
	case "version":
		return c.version(args[1:])
	case "archive":
		return c.archive(args[1:])
	case "key":
		return c.key(args[1:])
	case "receipt":
		return c.receipt(args[1:])
	case "help", "-h", "-help", "--help":
		if len(args) > 1 && args[0] == "help" {
			return c.run(ctx, append(args[1:], "-h"))
		}
		fmt.Fprint(c.stdout, usage)
		return exitOK
	}
	c.errorf("unknown command %q", args[0])
	fmt.Fprint(c.stderr, "hint: run 'descent help'\n")
	return exitUsage
}

// untilStopped runs a command that writes nothing and returns its status,
// or an interrupted status as soon as ctx is canceled.
func (c *cli) untilStopped(ctx context.Context, name string, f func() int) int {
	done := make(chan int, 1)
	go func() { done <- f() }()
	select {
	case code := <-done:
		return code
	case <-ctx.Done():
		c.errorf("%s: %v", name, context.Cause(ctx))
		return stopStatus(ctx)
	}
}

func (c *cli) errorf(format string, args ...any) {
	fmt.Fprintf(c.stderr, "descent: "+format+"\n", args...)
}

// hintf writes a hint line under a message.
func (c *cli) hintf(format string, args ...any) {
	fmt.Fprintf(c.stderr, "hint: "+format+"\n", args...)
}

// synopsis returns the lines of the top-level usage for a command.
func synopsis(name string) []string {
	var lines []string
	for _, l := range strings.Split(usage, "\n") {
		if l = strings.TrimSpace(l); strings.HasPrefix(l, "descent "+name+" ") {
			lines = append(lines, l)
		}
	}
	return lines
}

// flags makes the flag set of one subcommand. Its Usage writes the
// command's synopsis to stderr, for a mistake; -h writes the synopsis and
// the flags to stdout (parse).
func (c *cli) flags(name string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard) // parse reports errors itself, prefixed
	fs.Usage = func() {
		for i, l := range synopsis(name) {
			if i == 0 {
				fmt.Fprintf(c.stderr, "usage: %s\n", l)
			} else {
				fmt.Fprintf(c.stderr, "       %s\n", l)
			}
		}
		c.hintf("run 'descent %s -h' for the flags", name)
	}
	return fs
}

// parse parses args and returns an exit status if the command should
// stop. Flags may come anywhere among the other arguments (so that
// "descent check k16.dcert -json" means what it says); "--" ends the
// flags, and what follows is taken as file names.
func (c *cli) parse(fs *flag.FlagSet, args []string) (int, bool) {
	flagArgs, files := splitArgs(fs, args)
	usage := fs.Usage
	fs.Usage = func() {} // the flag package would call it; parse reports once
	err := fs.Parse(flagArgs)
	if err == nil { // leave the file names as fs.Args()
		err = fs.Parse(append([]string{"--"}, files...))
	}
	fs.Usage = usage
	switch {
	case errors.Is(err, flag.ErrHelp):
		for i, l := range synopsis(fs.Name()) {
			if i == 0 {
				fmt.Fprintf(c.stdout, "usage: %s\n", l)
			} else {
				fmt.Fprintf(c.stdout, "       %s\n", l)
			}
		}
		fmt.Fprintf(c.stdout, "\nflags:\n")
		fs.SetOutput(c.stdout)
		fs.PrintDefaults()
		fs.SetOutput(io.Discard)
		return exitOK, true
	case err != nil:
		c.errorf("%s: %s", fs.Name(), flagError(fs, err))
		fs.Usage()
		return exitUsage, true
	}
	return 0, false
}

var invalidValue = regexp.MustCompile(`^invalid (?:boolean )?value "(.*)" for (?:flag )?-([^:]+): (.*)$`)

// flagError words the flag package's errors for a value of the wrong form
// ("invalid value "x" for flag -k: parse error") as what is wanted.
func flagError(fs *flag.FlagSet, err error) string {
	m := invalidValue.FindStringSubmatch(err.Error())
	if m == nil {
		return err.Error()
	}
	value, name := m[1], m[2]
	want := "want a whole number"
	if f := fs.Lookup(name); f != nil {
		if g, ok := f.Value.(flag.Getter); ok {
			switch g.Get().(type) {
			case uint:
				want = "want a whole number, 0 or more"
			case bool:
				want = "want true or false"
			}
		}
	}
	if strings.HasSuffix(m[3], "out of range") {
		want = "out of range"
	}
	return fmt.Sprintf("-%s %s: %s", name, value, want)
}

// splitArgs separates flags (with their values) from the other arguments,
// wherever they stand. A flag that takes a value takes the next argument
// unless written -flag=value; "--" ends the flags. Unknown flags go with
// the flags, for fs.Parse to report.
func splitArgs(fs *flag.FlagSet, args []string) (flagArgs, files []string) {
	for i := 0; i < len(args); i++ {
		a := args[i]
		if a == "--" {
			return flagArgs, append(files, args[i+1:]...)
		}
		if len(a) < 2 || a[0] != '-' {
			files = append(files, a)
			continue
		}
		flagArgs = append(flagArgs, a)
		name := strings.TrimLeft(a, "-")
		if strings.Contains(name, "=") {
			continue
		}
		f := fs.Lookup(name)
		if f == nil {
			continue
		}
		if b, ok := f.Value.(interface{ IsBoolFlag() bool }); ok && b.IsBoolFlag() {
			continue
		}
		if i+1 < len(args) {
			i++
			flagArgs = append(flagArgs, args[i])
		}
	}
	return flagArgs, files
}

// given returns the names of the flags set on the command line.
func given(fs *flag.FlagSet) map[string]bool {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	return set
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
