// Package store writes files atomically, so that a crash or power loss
// leaves either the old or the new version of a checkpoint or model file,
// never a torn one.
package store

import (
	"fmt"
	"os"
	"path/filepath"
)

// WriteFile writes data to path atomically: it writes a temporary file in
// the same directory, fsyncs it, renames it over path and fsyncs the
// directory (POSIX rename is atomic within one file system; the directory
// fsync makes the rename itself durable).
func WriteFile(path string, data []byte, perm os.FileMode) (err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("store: %w", err)
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(tmp)
		}
	}()
	if _, err = f.Write(data); err != nil {
		return fmt.Errorf("store: write %s: %w", tmp, err)
	}
	if err = f.Chmod(perm); err != nil {
		return fmt.Errorf("store: %w", err)
	}
	if err = f.Sync(); err != nil {
		return fmt.Errorf("store: fsync %s: %w", tmp, err)
	}
	if err = f.Close(); err != nil {
		return fmt.Errorf("store: close %s: %w", tmp, err)
	}
	if err = os.Rename(tmp, path); err != nil {
		return fmt.Errorf("store: %w", err)
	}
	if d, derr := os.Open(dir); derr == nil {
		// Not every file system supports fsync on a directory; the rename
		// has happened either way.
		_ = d.Sync()
		d.Close()
	}
	return nil
}
