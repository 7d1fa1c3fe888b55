package main

import (
	"crypto/rand"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"

	"descent/receipt"
)

const keyUsage = `usage:
  descent key new [-name NAME] -o PATH
`

func (c *cli) key(args []string) int {
	if len(args) == 0 || args[0] != "new" {
		if len(args) > 0 && (args[0] == "help" || args[0] == "-h" || args[0] == "-help" || args[0] == "--help") {
			fmt.Fprint(c.stdout, keyUsage)
			return exitOK
		}
		c.errorf("key: want 'key new -o PATH'")
		fmt.Fprint(c.stderr, keyUsage)
		return exitUsage
	}
	set := c.flags("key new")
	out := set.String("o", "", "write the signer key to `PATH`.key (secret, mode 0600) and the verifier key to PATH.pub")
	name := set.String("name", "", "the key's `name`, which receipts show (default: the base name of PATH)")
	if code, stop := c.parse(set, args[1:]); stop {
		return code
	}
	if set.NArg() > 0 {
		c.errorf("key new: unexpected argument %q", set.Arg(0))
		return exitUsage
	}
	if *out == "" {
		c.errorf("key new: no output; give -o PATH")
		return exitUsage
	}
	if *name == "" {
		*name = filepath.Base(*out)
	}
	if !receipt.ValidName(*name) {
		c.errorf("key new: key name %q has a space or a '+'", *name)
		fmt.Fprintf(c.stderr, "hint: choose another with -name NAME\n")
		return exitUsage
	}
	keyPath, pubPath := *out+".key", *out+".pub"
	for _, p := range []string{keyPath, pubPath} {
		if _, err := os.Lstat(p); !errors.Is(err, fs.ErrNotExist) {
			c.errorf("key new: %s exists; a key is never overwritten", p)
			fmt.Fprintf(c.stderr, "hint: choose another -o, or move the old key away first\n")
			return exitUsage
		}
	}
	skey, vkey, err := receipt.NewKey(rand.Reader, *name)
	if err != nil {
		c.errorf("key new: %v", err)
		return exitUsage
	}
	if !c.writeWhole("key new", keyPath, []byte(skey+"\n"), 0o600, nil) {
		return exitUsage
	}
	if !c.writeWhole("key new", pubPath, []byte(vkey+"\n"), 0o644, nil) {
		removeWritten(keyPath) // a secret key without its public half is of no use
		return exitUsage
	}
	id, _ := receipt.VerifierName(vkey)
	fmt.Fprintf(c.stdout, "key %s\n  secret     %s (keep it; mode 0600)\n  public     %s (give it to those who verify receipts)\n", id, keyPath, pubPath)
	return exitOK
}
