//go:build !(linux || darwin || freebsd || netbsd || openbsd || dragonfly)

package cli

import (
	"errors"
	"io/fs"
	"os"
	"path/filepath"
)

// takeLock claims the output named base in dir by creating a hidden file
// beside it that must not exist yet. Without advisory locks a file left by
// a killed run cannot be told from a live one; the message says what to do.
func (c *outClaim) takeLock(dir, base string) error {
	c.lockAt = filepath.Join(dir, "."+base+".flowset-lock")
	f, err := os.OpenFile(c.lockAt, os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o644)
	if errors.Is(err, fs.ErrExist) {
		return usagef("%s%s: another flowset run is writing it (remove %s if none is)", c.what, shown(c.dest), shown(c.lockAt))
	}
	if err != nil {
		return sysErr(err)
	}
	c.lock = f
	return nil
}
