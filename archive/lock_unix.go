//go:build unix

package archive

import (
	"errors"
	"os"
	"syscall"
)

// lockDir takes an exclusive lock on the file at path, waiting for it if
// another process holds it (and calling waiting first). The kernel drops
// the lock when the process dies, so a killed descent leaves none behind.
func lockDir(path string, waiting func()) (*os.File, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, err
	}
	err = flock(f, syscall.LOCK_EX|syscall.LOCK_NB)
	if errors.Is(err, syscall.EWOULDBLOCK) {
		if waiting != nil {
			waiting()
		}
		err = flock(f, syscall.LOCK_EX)
	}
	if err != nil {
		f.Close()
		return nil, err
	}
	return f, nil
}

func flock(f *os.File, how int) error {
	for {
		err := syscall.Flock(int(f.Fd()), how)
		if !errors.Is(err, syscall.EINTR) {
			return err
		}
	}
}

func unlockDir(f *os.File) {
	syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
	f.Close()
}
