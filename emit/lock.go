//go:build linux || darwin || dragonfly || freebsd || netbsd || openbsd

package emit

import (
	"errors"
	"os"
	"syscall"
)

// TryLock takes an exclusive advisory lock on f without waiting, and
// returns ErrBusy if another process holds one. The lock goes with the
// open file: closing f or the end of the process, however it ends,
// releases it, so a file left by a killed run is never locked.
func TryLock(f *os.File) error {
	for {
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
		switch {
		case err == nil:
			return nil
		case errors.Is(err, syscall.EINTR):
			continue
		case errors.Is(err, syscall.EWOULDBLOCK):
			return ErrBusy
		}
		return errors.Join(ErrNoLocks, err)
	}
}
