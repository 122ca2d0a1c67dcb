package cli

import (
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"syscall"
)

// errExists is returned when an output would replace something without
// --force.
var errExists = errors.New("already exists (use --force to replace it)")

// markerName is the file flowset writes last into every output folder. It
// lists each file of the folder with its SHA-256, so --force can tell a
// folder flowset wrote, still as written, from anything else: it replaces
// only a folder whose files are exactly those listed, unchanged.
const markerName = ".flowset-output"

const markerHead = "# written by flowset: 'flowset ... --force' replaces this folder only while every file below is unchanged and nothing was added\n"

// outClaim is an output (a folder, or one file) that this run has claimed:
// its path resolved, checked against the inputs, and locked against other
// flowset runs until release.
type outClaim struct {
	what   string // how messages name it: "--out " or ""
	dest   string // as the user named it, for messages
	rdest  string // resolved parent joined with the base name
	force  bool
	file   bool // one file (a template workbook), not a folder
	lock   *os.File
	lockAt string
	made   []string // parent folders this run created, innermost last
}

// claimOut checks that dest (a folder, or with file one file) may be written (it does not exist, or force is
// given and it is an untouched output of flowset), that it is not, does not
// hold and does not lie inside any of inputs (paths compared after
// resolving symbolic links), and locks it against other flowset runs. It
// also removes the temporary folders a killed run left beside dest.
func claimOut(what, dest string, force, file bool, inputs []string) (*outClaim, error) {
	c := &outClaim{what: what, dest: dest, force: force, file: file}
	abs, err := filepath.Abs(dest)
	if err != nil {
		return nil, sysErr(err)
	}
	base := filepath.Base(abs)
	if base == string(filepath.Separator) || base == "." || base == ".." || filepath.Dir(abs) == abs {
		return nil, usagef("%s%s: names the root of the file system", what, shown(dest))
	}
	parent := filepath.Dir(abs)
	rparent, err := filepath.EvalSymlinks(parent)
	if errors.Is(err, fs.ErrNotExist) {
		// The parent folders are made now (they are needed for the lock)
		// and removed again if the run fails.
		if c.made, err = mkdirs(parent); err != nil {
			if errors.Is(err, syscall.ENOTDIR) || errors.Is(err, fs.ErrExist) {
				return nil, usagef("%s%s: a part of the path is a file, not a folder", what, shown(dest))
			}
			return nil, sysErr(err)
		}
		rparent, err = filepath.EvalSymlinks(parent)
	}
	if errors.Is(err, syscall.ENOTDIR) {
		c.unmake()
		return nil, usagef("%s%s: a part of the path is a file, not a folder", what, shown(dest))
	}
	if err != nil {
		c.unmake()
		return nil, sysErr(fmt.Errorf("%s%s: %w", what, shown(dest), err))
	}
	c.rdest = filepath.Join(rparent, base)
	if err := c.checkInputs(inputs); err != nil {
		c.unmake()
		return nil, err
	}
	if err := c.takeLock(rparent, base); err != nil {
		c.unmake()
		return nil, err
	}
	if err := c.checkDest(); err != nil {
		c.release()
		return nil, err
	}
	cleanStale(rparent, base)
	return c, nil
}

// shown is a path as it may be printed: control and direction characters
// escaped (see termSafe).
func shown(p string) string { return termSafe(p) }

// checkInputs refuses an output that is, holds or lies inside an input,
// or holds the current folder.
func (c *outClaim) checkInputs(inputs []string) error {
	for _, in := range inputs {
		rin, err := resolve(in)
		if err != nil {
			continue // an input that does not exist is reported by the loader
		}
		switch {
		case rin == c.rdest:
			return usagef("%s%s: is the input %s: outputs never replace inputs", c.what, shown(c.dest), shown(in))
		case within(c.rdest, rin):
			return usagef("%s%s: lies inside the input %s: outputs never go among the inputs", c.what, shown(c.dest), shown(in))
		case within(rin, c.rdest):
			return usagef("%s%s: holds the input %s: outputs never replace inputs", c.what, shown(c.dest), shown(in))
		}
	}
	if wd, err := os.Getwd(); err == nil {
		if rwd, err := filepath.EvalSymlinks(wd); err == nil && (rwd == c.rdest || within(rwd, c.rdest)) {
			return usagef("%s%s: is or holds the current folder; name a new folder for the outputs", c.what, shown(c.dest))
		}
	}
	return nil
}

// resolve returns p absolute with every symbolic link resolved.
func resolve(p string) (string, error) {
	abs, err := filepath.Abs(p)
	if err != nil {
		return "", err
	}
	return filepath.EvalSymlinks(abs)
}

// within reports whether p lies strictly inside dir (both resolved).
func within(p, dir string) bool {
	rel, err := filepath.Rel(dir, p)
	return err == nil && rel != "." && rel != ".." && !strings.HasPrefix(rel, ".."+string(filepath.Separator)) && !filepath.IsAbs(rel)
}

// checkDest refuses an existing destination without force, and with force
// anything but an untouched output of flowset.
func (c *outClaim) checkDest() error {
	fi, err := os.Lstat(c.rdest)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return sysErr(err)
	}
	if !c.force {
		return &usageError{fmt.Errorf("%s: %w", shown(c.dest), errExists)}
	}
	if c.file {
		// Its content is compared when the new file is ready.
		if !fi.Mode().IsRegular() {
			return usagef("--force: %s is not a file flowset wrote, so flowset will not replace it; move it away or remove it yourself", shown(c.dest))
		}
		return nil
	}
	return untouched(c.dest, c.rdest, fi)
}

// untouched returns nil when the existing path is a folder that flowset
// wrote and nobody changed since, and a usage error saying why not
// otherwise.
func untouched(name, p string, fi fs.FileInfo) error {
	refuse := func(why string) error {
		return usagef("--force: %s %s, so flowset will not replace it; move it away or remove it yourself", shown(name), why)
	}
	switch {
	case fi.Mode()&fs.ModeSymlink != 0:
		return refuse("is a symbolic link")
	case !fi.IsDir():
		return refuse("is not a folder flowset wrote")
	}
	listed, err := readMarker(filepath.Join(p, markerName))
	if err != nil {
		return refuse("was not written by flowset (it has no readable " + markerName + " file)")
	}
	err = filepath.WalkDir(p, func(fp string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, err := filepath.Rel(p, fp)
		if err != nil {
			return err
		}
		rel = filepath.ToSlash(rel)
		switch {
		case rel == "." || rel == markerName:
			return nil
		case d.IsDir():
			return nil
		case !d.Type().IsRegular():
			return fmt.Errorf("holds %s, which flowset did not write", termSafe(rel))
		}
		want, ok := listed[rel]
		if !ok {
			return fmt.Errorf("holds %s, which flowset did not write", termSafe(rel))
		}
		got, err := fileSum(fp)
		if err != nil {
			return err
		}
		if got != want {
			return fmt.Errorf("holds %s, changed since flowset wrote it", termSafe(rel))
		}
		return nil
	})
	if err != nil {
		return refuse(err.Error())
	}
	return nil
}

// readMarker reads a marker file into name -> SHA-256 (hex).
func readMarker(p string) (map[string]string, error) {
	f, err := os.Open(p)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	if fi, err := f.Stat(); err != nil || !fi.Mode().IsRegular() || fi.Size() > 1<<20 {
		return nil, errors.New("not a marker file")
	}
	out := map[string]string{}
	sc := bufio.NewScanner(f)
	first := true
	for sc.Scan() {
		line := sc.Text()
		if first {
			if line+"\n" != markerHead {
				return nil, errors.New("not a marker file")
			}
			first = false
			continue
		}
		sum, name, ok := strings.Cut(line, "  ")
		if !ok || len(sum) != 64 || name == "" {
			return nil, errors.New("malformed marker file")
		}
		out[name] = sum
	}
	if first {
		return nil, errors.New("empty marker file")
	}
	return out, sc.Err()
}

func fileSum(p string) (string, error) {
	f, err := os.Open(p)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", err
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// tmpPrefix is the start of the name of the temporary folders and files
// assembled beside the output named base.
func tmpPrefix(base string) string { return "." + base + ".tmp-" }

// cleanStale removes the temporary folders and files a run killed before
// it could clean up left beside the output named base. The caller holds
// the output's lock, so no live run is using them.
func cleanStale(dir, base string) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return
	}
	for _, e := range entries {
		if isTmpName(e.Name(), base) {
			os.RemoveAll(filepath.Join(dir, e.Name()))
		}
	}
}

// isTmpName reports whether name is one of the temporary names of the
// output named base: its prefix, the random digits MkdirTemp and
// CreateTemp add, and for a replaced folder ".old".
func isTmpName(name, base string) bool {
	rest, ok := strings.CutPrefix(name, tmpPrefix(base))
	if !ok {
		return false
	}
	rest = strings.TrimSuffix(rest, ".old")
	return rest != "" && strings.Trim(rest, "0123456789") == ""
}

// mkdirs makes p and any missing parents, returning those it made,
// outermost first.
func mkdirs(p string) ([]string, error) {
	var missing []string
	for q := p; ; q = filepath.Dir(q) {
		if _, err := os.Lstat(q); err == nil {
			break
		}
		missing = append(missing, q)
		if filepath.Dir(q) == q {
			break
		}
	}
	slices.Reverse(missing)
	var made []string
	for _, q := range missing {
		if err := os.Mkdir(q, 0o755); err != nil && !errors.Is(err, fs.ErrExist) {
			removeAll(made)
			return nil, err
		}
		made = append(made, q)
	}
	return made, nil
}

// removeAll removes the empty folders made, innermost first.
func removeAll(made []string) {
	for i := len(made) - 1; i >= 0; i-- {
		os.Remove(made[i])
	}
}

func (c *outClaim) unmake() {
	removeAll(c.made)
	c.made = nil
}

// release drops the lock.
func (c *outClaim) release() {
	if c.lock != nil {
		os.Remove(c.lockAt)
		c.lock.Close()
		c.lock = nil
	}
}

// finish releases the claim after the run; when the output was not
// written, the parent folders made for it go too.
func (c *outClaim) finish(written bool) {
	c.release()
	if !written {
		c.unmake()
	}
}

// hashedFile is a file being written into an output folder, hashed as it
// goes for the marker.
type hashedFile struct {
	f    *os.File
	h    hash.Hash
	name string
	d    *dirWriter
}

func (w *hashedFile) Write(p []byte) (int, error) {
	n, err := w.f.Write(p)
	w.h.Write(p[:n])
	return n, err
}

func (w *hashedFile) Close() error {
	if err := w.f.Close(); err != nil {
		return err
	}
	w.d.mu.Lock()
	w.d.sums[w.name] = hex.EncodeToString(w.h.Sum(nil))
	w.d.mu.Unlock()
	return nil
}

// dirWriter creates files inside a folder that is being assembled and
// remembers their checksums; files may be created and written side by
// side.
type dirWriter struct {
	root string
	mu   sync.Mutex // guards sums
	sums map[string]string
}

func (d *dirWriter) create(name string) (io.WriteCloser, error) {
	if name == "" || strings.Contains(name, "..") || filepath.IsAbs(name) || name == markerName {
		return nil, fmt.Errorf("output name %q is not a plain file name", name)
	}
	p := filepath.Join(d.root, filepath.FromSlash(name))
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		return nil, err
	}
	f, err := os.OpenFile(p, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return nil, err
	}
	return &hashedFile{f: f, h: sha256.New(), name: name, d: d}, nil
}

func (d *dirWriter) writeMarker() error {
	var b bytes.Buffer
	b.WriteString(markerHead)
	names := make([]string, 0, len(d.sums))
	for n := range d.sums {
		names = append(names, n)
	}
	slices.Sort(names)
	for _, n := range names {
		fmt.Fprintf(&b, "%s  %s\n", d.sums[n], n)
	}
	return os.WriteFile(filepath.Join(d.root, markerName), b.Bytes(), 0o644)
}

// writeDir builds the whole output folder under a temporary name beside
// it and renames it into place at the end, so a failed or cancelled run
// leaves nothing visible. An existing folder (force) is replaced only after
// the new one is complete, and only if it is still an untouched output.
func (c *outClaim) writeDir(ctx context.Context, fill func(create func(name string) (io.WriteCloser, error)) error) error {
	parent, base := filepath.Split(c.rdest)
	tmp, err := os.MkdirTemp(parent, tmpPrefix(base)+"*")
	if err != nil {
		return sysErr(err)
	}
	defer os.RemoveAll(tmp) // no-op after a successful rename
	// MkdirTemp makes a private folder; the result is an ordinary one.
	if err := os.Chmod(tmp, 0o755); err != nil {
		return sysErr(err)
	}
	d := &dirWriter{root: tmp, sums: map[string]string{}}
	if err := fill(d.create); err != nil {
		return sysErr(err)
	}
	if err := d.writeMarker(); err != nil {
		return sysErr(err)
	}
	if err := syncDir(tmp); err != nil {
		return sysErr(err)
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	fi, err := os.Lstat(c.rdest)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if err := os.Rename(tmp, c.rdest); err != nil {
			if _, lerr := os.Lstat(c.rdest); lerr == nil {
				return &usageError{fmt.Errorf("%s: %w", shown(c.dest), errExists)}
			}
			return sysErr(err)
		}
		return nil
	case err != nil:
		return sysErr(err)
	case !c.force:
		return &usageError{fmt.Errorf("%s: %w", shown(c.dest), errExists)}
	}
	// Checked again: it may have changed while the job ran.
	if err := untouched(c.dest, c.rdest, fi); err != nil {
		return err
	}
	old := tmp + ".old"
	if err := os.Rename(c.rdest, old); err != nil {
		return sysErr(err)
	}
	if err := os.Rename(tmp, c.rdest); err != nil {
		os.Rename(old, c.rdest)
		return sysErr(err)
	}
	os.RemoveAll(old)
	return nil
}

// writeFile writes one output file through a temporary file in the same
// folder, moved into place at the end, so the destination is either as it
// was or the whole new file. An existing file is replaced (force) only when
// it holds exactly what same(existing) accepts.
func (c *outClaim) writeFile(ctx context.Context, write func(io.Writer) error, same func(existing []byte) bool) error {
	parent, base := filepath.Split(c.rdest)
	f, err := os.CreateTemp(parent, tmpPrefix(base)+"*")
	if err != nil {
		return sysErr(err)
	}
	tmp := f.Name()
	defer os.Remove(tmp) // no-op after a successful rename
	if err := write(f); err != nil {
		f.Close()
		return sysErr(fmt.Errorf("writing %s: %w", shown(c.dest), err))
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return sysErr(err)
	}
	if err := f.Close(); err != nil {
		return sysErr(err)
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	fi, err := os.Lstat(c.rdest)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		// A hard link fails if the name was taken meanwhile.
		if err := os.Link(tmp, c.rdest); err != nil {
			if _, lerr := os.Lstat(c.rdest); lerr == nil {
				return &usageError{fmt.Errorf("%s: %w", shown(c.dest), errExists)}
			}
			return sysErr(os.Rename(tmp, c.rdest))
		}
		return nil
	case err != nil:
		return sysErr(err)
	case !c.force:
		return &usageError{fmt.Errorf("%s: %w", shown(c.dest), errExists)}
	case !fi.Mode().IsRegular():
		return usagef("--force: %s is not a file flowset wrote, so flowset will not replace it; move it away or remove it yourself", shown(c.dest))
	case fi.Size() > maxTemplateSize:
		return usagef("--force: %s is not an untouched file flowset wrote, so flowset will not replace it; move it away or remove it yourself", shown(c.dest))
	}
	old, err := os.ReadFile(c.rdest)
	if err != nil {
		return sysErr(err)
	}
	if !same(old) {
		return usagef("--force: %s is not an untouched file flowset wrote, so flowset will not replace it; move it away or remove it yourself", shown(c.dest))
	}
	return sysErr(os.Rename(tmp, c.rdest))
}

// maxTemplateSize bounds the file --force compares with a fresh template.
const maxTemplateSize = 16 << 20

// syncDir flushes the files of a finished output folder to disk, so a
// full disk is noticed before the folder is moved into place.
func syncDir(dir string) error {
	return filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		f, err := os.Open(p)
		if err != nil {
			return err
		}
		err = f.Sync()
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		return err
	})
}
