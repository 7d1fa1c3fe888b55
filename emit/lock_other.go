//go:build !(linux || darwin || dragonfly || freebsd || netbsd || openbsd)

package emit

import "os"

// TryLock cannot lock on this system: it says so, and callers leave
// files they cannot tell to be abandoned in place.
func TryLock(f *os.File) error { return ErrNoLocks }
