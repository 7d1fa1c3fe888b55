//go:build archivekill

package main

import (
	"fmt"
	"os"
	"time"
)

// archivePause, in the binary the kill tests build, stops an archive add
// at the point named by DESCENT_ARCHIVE_PAUSE: it says so on stderr and
// waits there for the test's SIGKILL.
func archivePause() func(string) {
	want := os.Getenv("DESCENT_ARCHIVE_PAUSE")
	if want == "" {
		return nil
	}
	return func(point string) {
		if point == want {
			fmt.Fprintf(os.Stderr, "paused at %s\n", point)
			for { // a blocked select would be reported as a deadlock
				time.Sleep(time.Hour)
			}
		}
	}
}
