package main

import (
	"flag"
	"io"
	"os"

	"descent/cert"
)

// checkFlagsOK rejects options of check that would do nothing, or that
// contradict each other, before any file is read.
func (c *cli) checkFlagsOK(fs *flag.FlagSet) bool {
	set := given(fs)
	sample := fs.Lookup("sample").Value.(flag.Getter).Get().(int)
	switch {
	case set["seed"] && !set["sample"]:
		c.errorf("check: -seed without -sample: the seed chooses the blocks that -sample N audits")
		c.hintf("give -sample N too, or leave -seed out for a full check")
	case set["sample"] && sample <= 0:
		c.errorf("check: -sample %d: want at least 1 block", sample)
		c.hintf("leave -sample out for a full check")
	case set["part"] && set["shard"]:
		c.errorf("check: -part and -shard both choose the records to check: give one")
	case set["part"] && set["sample"]:
		c.errorf("check: -part checks one record through its audit path; -sample draws blocks to audit: give one")
	default:
		return true
	}
	return false
}

// checkKindsOK reads the kind of each certificate and rejects -sieve,
// -sample and -seed when no file given is a range certificate or a shard
// of one: a sieve certificate rests on nothing and is always checked in
// full. A file whose kind cannot be read is left to the check to report.
func (c *cli) checkKindsOK(fs *flag.FlagSet) bool {
	set := given(fs)
	var opts []string
	for _, name := range []string{"sieve", "sample", "seed"} {
		if set[name] {
			opts = append(opts, "-"+name)
		}
	}
	if len(opts) == 0 {
		return true
	}
	for _, path := range fs.Args() {
		if _, whole, ok, _ := certKind(path); !ok || whole == cert.KindRange {
			return true
		}
	}
	c.errorf("check: %s: no certificate given is a range certificate; a sieve certificate rests on no other and is always checked in full", joinWords(opts))
	c.hintf("leave %s out", joinWords(opts))
	return false
}

// certKind reads the kind of the certificate at path and, for a shard,
// the kind of the whole it belongs to. ok is false for a file that is no
// certificate; err is set only if the file cannot be read at all.
func certKind(path string) (kind, whole byte, ok bool, err error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, 0, false, err
	}
	defer f.Close()
	var b [cert.PreambleSize + 1]byte
	if _, err := io.ReadFull(f, b[:]); err != nil || string(b[:len(cert.Magic)]) != cert.Magic {
		return 0, 0, false, nil
	}
	kind, whole = b[9], b[9]
	if kind == cert.KindShard {
		whole = b[cert.PreambleSize] // the shard header begins with the whole's kind
	}
	return kind, whole, true, nil
}

// joinWords writes a, b and c.
func joinWords(w []string) string {
	switch len(w) {
	case 1:
		return w[0]
	case 2:
		return w[0] + " and " + w[1]
	}
	s := ""
	for i, x := range w {
		switch {
		case i == len(w)-1:
			s += ", and " + x
		case i > 0:
			s += ", " + x
		default:
			s = x
		}
	}
	return s
}
