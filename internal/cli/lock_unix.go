//go:build linux || darwin || freebsd || netbsd || openbsd || dragonfly

package cli

import (
	"errors"
	"os"
	"path/filepath"
	"syscall"
)

// takeLock locks the output named base in dir against other flowset runs
// with an advisory lock on a hidden file beside it. The system drops the
// lock when the process ends, however it ends, so a killed run never
// blocks the next one.
func (c *outClaim) takeLock(dir, base string) error {
	c.lockAt = filepath.Join(dir, "."+base+".flowset-lock")
	for range 10 {
		f, err := os.OpenFile(c.lockAt, os.O_RDWR|os.O_CREATE, 0o644)
		if err != nil {
			return sysErr(err)
		}
		if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
			f.Close()
			if errors.Is(err, syscall.EWOULDBLOCK) {
				return usagef("%s%s: another flowset run is writing it", c.what, shown(c.dest))
			}
			return sysErr(err)
		}
		// The file may have been removed by the run that held it between
		// the open and the lock: then the lock guards nothing; try again.
		fi, err1 := f.Stat()
		di, err2 := os.Lstat(c.lockAt)
		if err1 == nil && err2 == nil && os.SameFile(fi, di) {
			c.lock = f
			return nil
		}
		f.Close()
	}
	return usagef("%s%s: another flowset run is writing it", c.what, shown(c.dest))
}
