package store

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// syncFile and syncDir flush a file's data and a directory's entries to stable storage
// (fsync(2)); they are variables so that a test can record the order of the calls.
var (
	syncFile = func(f *os.File) error { return f.Sync() }
	syncDir  = func(dir string) error {
		d, err := os.Open(dir)
		if err != nil {
			return err
		}
		defer d.Close()
		return d.Sync()
	}
)

// writeFile is Write for a file:// store, durable across a node crash: the data goes to a
// temporary file beside the target (name ending in ".tmp", which List skips), is flushed with
// fsync, renamed over the target, and then the directory is flushed so that the rename itself
// survives; directories created on the way are flushed into their parents the same way. A
// reader sees the old object or the whole new one, and after the call returns a crash cannot
// bring back the old one or leave an empty file (rename without fsync can, on file systems
// that delay allocation: the rename reaches the disk before the data). fileblob, which the
// other operations use, renames without fsync. key is already cleaned (no "..", no empty
// segments), so the path is dir joined with it, as fileblob maps it.
func (s *Store) writeFile(key string, fn func(w io.Writer) error) (err error) {
	path := filepath.Join(s.dir, filepath.FromSlash(key))
	parent := filepath.Dir(path)
	if err := mkdirDurable(parent); err != nil {
		return fmt.Errorf("store: write %s: %w", s.Describe(key), classify(err))
	}
	f, err := os.CreateTemp(parent, "."+filepath.Base(path)+".*.tmp")
	if err != nil {
		return fmt.Errorf("store: write %s: %w", s.Describe(key), classify(err))
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			_ = f.Close()
			_ = os.Remove(tmp)
		}
	}()
	if err := fn(f); err != nil {
		return err
	}
	werr := func(err error) error { return fmt.Errorf("store: write %s: %w", s.Describe(key), classify(err)) }
	if err := syncFile(f); err != nil {
		return werr(err)
	}
	if err := f.Close(); err != nil {
		return werr(err)
	}
	if err := os.Chmod(tmp, 0o644); err != nil {
		return werr(err)
	}
	committing("write", key)
	if err := os.Rename(tmp, path); err != nil {
		return werr(err)
	}
	if err := syncDir(parent); err != nil {
		return werr(err)
	}
	return nil
}

// mkdirDurable creates dir and its missing parents, flushing each new entry into its parent.
func mkdirDurable(dir string) error {
	fi, err := os.Stat(dir)
	if err == nil {
		if !fi.IsDir() {
			return fmt.Errorf("%s is not a directory: %w", dir, os.ErrExist)
		}
		return nil
	}
	if !errors.Is(err, os.ErrNotExist) {
		return err
	}
	parent := filepath.Dir(dir)
	if parent != dir {
		if err := mkdirDurable(parent); err != nil {
			return err
		}
	}
	if err := os.Mkdir(dir, 0o755); err != nil && !errors.Is(err, os.ErrExist) {
		return err
	}
	return syncDir(parent)
}
