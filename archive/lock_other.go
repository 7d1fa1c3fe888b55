//go:build !unix

package archive

import "os"

// lockDir opens the lock file without locking it: this system has no
// flock, so two processes must not use one archive at once.
func lockDir(path string, waiting func()) (*os.File, error) {
	return os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
}

func unlockDir(f *os.File) { f.Close() }
