package cli

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// errExists is returned when an output would replace something without
// --force.
var errExists = errors.New("already exists (use --force to replace it)")

// writeFileAtomic writes a file through a temporary file in the same folder
// renamed into place, so the destination is either the old file or the whole
// new one.
func writeFileAtomic(path string, force bool, write func(io.Writer) error) error {
	if _, err := os.Lstat(path); err == nil && !force {
		return &usageError{fmt.Errorf("%s: %w", path, errExists)}
	}
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return err
	}
	tmp := f.Name()
	defer os.Remove(tmp) // no-op after a successful rename
	if err := write(f); err != nil {
		f.Close()
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}

// dirWriter creates files inside a folder that is being assembled.
type dirWriter struct{ root string }

func (d *dirWriter) create(name string) (io.WriteCloser, error) {
	if name == "" || strings.Contains(name, "..") || filepath.IsAbs(name) {
		return nil, fmt.Errorf("output name %q is not a plain file name", name)
	}
	p := filepath.Join(d.root, filepath.FromSlash(name))
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		return nil, err
	}
	return os.OpenFile(p, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
}

// writeDirAtomic builds a whole output folder under a temporary name beside
// dest and renames it into place at the end, so a failed run leaves nothing
// half-written. An existing dest is replaced only with force, and then only
// after the new folder is complete.
func writeDirAtomic(dest string, force bool, fill func(create func(name string) (io.WriteCloser, error)) error) error {
	dest = filepath.Clean(dest)
	if _, err := os.Lstat(dest); err == nil && !force {
		return &usageError{fmt.Errorf("%s: %w", dest, errExists)}
	} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	parent := filepath.Dir(dest)
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return err
	}
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(dest)+".tmp-*")
	if err != nil {
		return err
	}
	defer os.RemoveAll(tmp) // no-op after a successful rename
	// MkdirTemp makes a private folder; the result is an ordinary one.
	if err := os.Chmod(tmp, 0o755); err != nil {
		return err
	}
	if err := fill((&dirWriter{tmp}).create); err != nil {
		return err
	}
	if _, err := os.Lstat(dest); err == nil {
		old := tmp + ".old"
		if err := os.Rename(dest, old); err != nil {
			return err
		}
		if err := os.Rename(tmp, dest); err != nil {
			os.Rename(old, dest)
			return err
		}
		return os.RemoveAll(old)
	}
	return os.Rename(tmp, dest)
}
