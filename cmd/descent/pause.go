//go:build !archivekill

package main

// archivePause is nil: only the binary built for the kill tests (build
// tag archivekill) can be stopped inside an archive add.
func archivePause() func(string) { return nil }
