package archive

import (
	"os"
	"path/filepath"
)

// syncDir makes a rename or a new file in dir durable: without it a crash
// can forget the directory entry even though the file's bytes are synced.
func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	return d.Sync()
}

func syncFile(path string) error {
	f, err := os.OpenFile(path, os.O_RDWR, 0)
	if err != nil {
		return err
	}
	defer f.Close()
	return f.Sync()
}

// writeFileAtomic writes dir/name through a synced temporary file and a
// rename, so that dir/name is either absent, the old file, or all of data.
func writeFileAtomic(dir, name string, data []byte, perm os.FileMode) error {
	f, err := os.CreateTemp(dir, "."+name+".partial-*")
	if err != nil {
		return err
	}
	ok := false
	defer func() {
		if !ok {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	if _, err := f.Write(data); err != nil {
		return err
	}
	if err := f.Chmod(perm); err != nil {
		return err
	}
	if err := f.Sync(); err != nil {
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	if err := os.Rename(f.Name(), filepath.Join(dir, name)); err != nil {
		return err
	}
	ok = true
	return syncDir(dir)
}
