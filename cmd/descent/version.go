package main

import (
	"fmt"
)

// version prints the module version, the VCS revision and the Go version
// the program was built with: the same build information every
// 'check -json' report carries as "checker".
func (c *cli) version(args []string) int {
	fs := c.flags("version")
	asJSON := fs.Bool("json", false, "write the build information as JSON")
	if code, stop := c.parse(fs, args); stop {
		return code
	}
	if fs.NArg() > 0 {
		c.errorf("version: unexpected argument %q", fs.Arg(0))
		return exitUsage
	}
	v := Version()
	if *asJSON {
		return c.writeJSON(v)
	}
	rev := v.Revision
	switch {
	case rev == "":
		rev = "unknown (built without VCS information; see 'go help buildvcs')"
	case v.Modified:
		rev += " (with uncommitted changes)"
	}
	fmt.Fprintf(c.stdout, "descent %s\n  module     %s\n  revision   %s\n", v.Version, v.Module, rev)
	if v.Time != "" {
		fmt.Fprintf(c.stdout, "  committed  %s\n", v.Time)
	}
	fmt.Fprintf(c.stdout, "  go         %s\n", v.Go)
	return exitOK
}
