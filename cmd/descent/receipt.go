package main

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"time"

	"descent/cert"
	"descent/check/kernel"
	"descent/receipt"
)

const receiptUsage = `usage:
  descent receipt verify -key NAME.pub RECEIPT [FILE]
`

// checkerVersion names this program in receipts. (The version subcommand
// will own this; until then the build info is read here.)
// checkerVersion names the running checker in a receipt: module, version
// and VCS revision from the one reading of the build information that
// 'descent version' and 'check -json' print.
func checkerVersion() string {
	v := Version()
	s := v.Module + " " + v.Version
	if v.Revision != "" {
		s += " rev " + v.Revision
		if v.Modified {
			s += " modified"
		}
	}
	return s
}

// receiptJob is a receipt that check was asked to write.
type receiptJob struct {
	out, skey, signer string
	inputs            []input // the certificate and the key, which the receipt must not replace
}

// receiptSetup reads -receipt and -sign before any work is done, so that
// a bad key or an existing output costs no check. It returns nil when no
// receipt is asked for.
func (c *cli) receiptSetup(out, sign string, files []string) (*receiptJob, int, bool) {
	switch {
	case out == "" && sign == "":
		return nil, 0, false
	case out == "" || sign == "":
		c.errorf("check: -receipt OUT and -sign KEY go together")
		return nil, exitUsage, true
	case len(files) != 1:
		c.errorf("check: -receipt: want exactly one certificate, not %d", len(files))
		return nil, exitUsage, true
	}
	if _, err := os.Lstat(out); !errors.Is(err, fs.ErrNotExist) {
		c.errorf("check: -receipt %s: the file exists; a receipt is never overwritten", out)
		return nil, exitUsage, true
	}
	skey, err := readKey(sign)
	if err == nil {
		var name string
		if name, err = receipt.SignerName(skey); err == nil {
			if kind, err := peekKind(files[0]); err == nil && kind == cert.KindShard {
				c.errorf("check: -receipt: %s is a shard file; receipts are for whole certificates (check a share of one with -shard i/N)", files[0])
				return nil, exitUsage, true
			}
			return &receiptJob{out: out, skey: skey, signer: name,
				inputs: []input{{"the certificate", files[0]}, {"the -sign key", sign}}}, 0, false
		}
	}
	c.errorf("check: -sign %s: %v", sign, err)
	if errors.Is(err, receipt.ErrMalformed) {
		fmt.Fprintf(c.stderr, "hint: -sign takes the secret NAME.key that 'descent key new -o NAME' wrote\n")
	}
	return nil, exitUsage, true
}

// readKey reads a key file of at most receipt.MaxKeySize bytes.
func readKey(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, receipt.MaxKeySize+1))
	if err != nil {
		return "", err
	}
	return receipt.ParseKey(b)
}

// write signs and writes the receipt of rep. A certificate that could not
// be read or checked (malformed, beyond the limits) gets none. It returns
// the exit status the receipt adds.
func (j *receiptJob) write(c *cli, rep *Report, part string) int {
	if err := rep.Err(); rep.Root == "" || err != nil && !errors.Is(err, kernel.ErrInvalid) {
		c.errorf("check: %s: no receipt written: the certificate could not be checked (%s)", rep.File, rep.Reason)
		return exitOK
	}
	r := receiptOf(rep, part, checkerVersion(), time.Now())
	msg, err := receipt.Sign(r, j.skey)
	if err != nil {
		c.errorf("check: -receipt %s: %v", j.out, err)
		return exitUsage
	}
	if !c.writeWhole("check", j.out, msg, 0o644, j.inputs) {
		return exitUsage
	}
	c.errorf("check: wrote receipt %s, signed by %s", j.out, j.signer)
	return exitOK
}

// receiptOf is the receipt of a check: the claim in the words check
// prints, and the mode from what the report says was re-derived.
func receiptOf(rep *Report, part, checker string, t time.Time) *receipt.Receipt {
	r := &receipt.Receipt{Root: rep.Root, Kind: rep.Kind, Map: rep.Map, K: rep.K, Checker: checker, Time: t,
		Result: receipt.Result{Valid: rep.Valid, Reason: rep.Reason}}
	switch rep.Kind {
	case "sieve":
		r.J, r.Claim = rep.J, factsFromReport(rep).summary()
	case "range":
		r.From, r.To, r.Sieve = string(rep.From), string(rep.To), rep.SieveRoot
		r.Claim = rangeFactsFromReport(rep).summary()
	}
	switch {
	case part != "":
		r.Mode.Part = part
	case rep.Span != nil:
		r.Mode.Shard = &receipt.Share{I: rep.Span.Index, N: rep.Span.Of}
	}
	if a := rep.Audit; a != nil {
		r.Mode.Audit = &receipt.Audit{Drawn: a.Audited, Blocks: a.Blocks, Seed: a.Seed}
	}
	return r
}

func (c *cli) receipt(args []string) int {
	if len(args) == 0 || args[0] != "verify" {
		if len(args) > 0 && (args[0] == "help" || args[0] == "-h" || args[0] == "-help" || args[0] == "--help") {
			fmt.Fprint(c.stdout, receiptUsage)
			return exitOK
		}
		c.errorf("receipt: want 'receipt verify -key NAME.pub RECEIPT [FILE]'")
		fmt.Fprint(c.stderr, receiptUsage)
		return exitUsage
	}
	set := c.flags("receipt verify")
	keyPath := set.String("key", "", "the verifier key `NAME.pub` the receipt must be signed with")
	rest, code, stop := c.parseAll(set, args[1:])
	if stop {
		return code
	}
	if *keyPath == "" || len(rest) < 1 || len(rest) > 2 {
		c.errorf("receipt verify: want -key NAME.pub, a receipt and at most one certificate")
		set.Usage()
		return exitUsage
	}
	vkey, err := readKey(*keyPath)
	if err == nil {
		_, err = receipt.VerifierName(vkey)
	}
	if err != nil {
		c.errorf("receipt verify: -key %s: %v", *keyPath, err)
		if _, serr := receipt.SignerName(vkey); serr == nil {
			fmt.Fprintf(c.stderr, "hint: that is a secret signer key; give the NAME.pub beside it\n")
		}
		return exitUsage
	}
	path := rest[0]
	f, err := os.Open(path)
	if err != nil {
		c.errorf("receipt verify: %v", err)
		return exitUsage
	}
	msg, err := io.ReadAll(io.LimitReader(f, receipt.MaxSize+1))
	f.Close()
	if err != nil {
		c.errorf("receipt verify: %s: %v", path, err)
		return exitUsage
	}
	r, err := receipt.Open(msg, vkey)
	switch {
	case errors.Is(err, receipt.ErrBadSignature):
		c.errorf("receipt verify: %s: %v", path, err)
		return exitInvalid
	case errors.Is(err, receipt.ErrOtherKey):
		c.errorf("receipt verify: %s: %v", path, err)
		return exitInvalid
	case err != nil:
		c.errorf("receipt verify: %s: %v", path, err)
		return exitUsage
	}
	signer, _ := receipt.VerifierName(vkey)
	fmt.Fprintf(c.stdout, "%s: good signature by %s\n  root       %s\n  kind       %s %s\n  claim      %s\n  checker    %s\n  mode       %s\n  result     %s\n  time       %s\n",
		path, signer, r.Root, r.Kind, r.Map, r.Claim, r.Checker, r.Mode, r.Outcome(), r.Time.Format(time.RFC3339))
	if len(rest) == 2 {
		file := rest[1]
		root, err := verifiedRoot(file)
		switch {
		case errors.Is(err, cert.ErrHashMismatch):
			c.errorf("receipt verify: %s: %v: the file is damaged, so it is not the certificate the receipt names", file, err)
			return exitInvalid
		case err != nil:
			c.errorf("receipt verify: %s: %v", file, err)
			return exitUsage
		case root.String() != r.Root:
			c.errorf("receipt verify: %s: its root is %s; the receipt is about another certificate, %s", file, root, r.Root)
			return exitInvalid
		}
		fmt.Fprintf(c.stdout, "%s: its root is the receipt's\n", file)
	}
	if !r.Result.Valid {
		c.errorf("receipt verify: %s: the receipt is genuine, and records that the check found the certificate invalid (%s)", path, r.Result.Reason)
		return exitInvalid
	}
	return exitOK
}

// verifiedRoot reads a certificate whole and returns its root once every
// record and the header match the stored tree: the bytes are then the
// ones the root names. It checks no claim.
func verifiedRoot(path string) (cert.Hash, error) {
	f, err := os.Open(path)
	if err != nil {
		return cert.Hash{}, err
	}
	defer f.Close()
	rd, err := cert.NewReader(f)
	if err != nil {
		return cert.Hash{}, err
	}
	if err := rd.CheckTree(); err != nil {
		return cert.Hash{}, err
	}
	for i := 1; ; i++ {
		rec, err := rd.Next()
		if err == io.EOF {
			return rd.Root(), nil
		}
		if err != nil {
			return cert.Hash{}, err
		}
		if got := cert.LeafHash(rec); got != rd.Levels[0][i] {
			return cert.Hash{}, fmt.Errorf("record %d hashes to %v, the stored tree says %v: %w", i-1, got, rd.Levels[0][i], cert.ErrHashMismatch)
		}
	}
}
