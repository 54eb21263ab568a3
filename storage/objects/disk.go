package objects

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"syscall"

	"beamledger"
)

// The disk store's own folders under its root. Keys cannot name them, because
// no key segment may start with '.'.
const (
	// diskTempDir holds objects being written. It sits in the root so that
	// the final rename never crosses file systems, which would make it a copy.
	diskTempDir = ".tmp"
	// diskUploadsDir holds one folder per pending multipart upload.
	diskUploadsDir = ".uploads"
)

// Disk keeps objects as files in a directory: key "a/b/c" is the file
// <dir>/a/b/c. It suits a single server, development and tests.
//
// Every object is written to a temporary file in <dir>/.tmp, synced, and then
// renamed onto its key, so a crash never leaves a partial object under a key;
// it may leave a temporary file in .tmp, which is safe to delete while no Put
// runs. Empty folders left by Delete and Promote are not removed: with
// content-addressed keys there are few of them, and removing them would race
// with a Put into the same folder.
//
// Disk keeps no content type and ignores PutOptions.RetainUntil: files on a
// local disk cannot be protected from their owner, so the retention a caller
// asks for is recorded by the caller, not enforced here.
//
// Because a key is a path, one key cannot be both an object and the folder of
// another ("a" and "a/b"); Put, Promote and CompleteMultipart refuse the
// second with beamledger.ErrConflict. An S3 server with a POSIX back end has
// the same limit; content-addressed keys never meet it.
type Disk struct {
	root string
}

var _ Store = (*Disk)(nil)

// NewDisk opens (creating it if needed) the store in dir.
func NewDisk(dir string) (*Disk, error) {
	root, err := filepath.Abs(dir)
	if err != nil {
		return nil, fmt.Errorf("objects: disk store %q: %w", dir, err)
	}
	for _, sub := range []string{diskTempDir, diskUploadsDir} {
		if err := os.MkdirAll(filepath.Join(root, sub), 0o750); err != nil {
			return nil, fmt.Errorf("objects: disk store: %w", err)
		}
	}
	return &Disk{root: root}, nil
}

// Name returns the store's file URL.
func (d *Disk) Name() string { return "file://" + filepath.ToSlash(d.root) }

// MinPartSize is 1: parts are files joined by copying, so any non-empty part
// but the last will do.
func (d *Disk) MinPartSize() int64 { return 1 }

// path is the file of a checked key.
func (d *Disk) path(key string) string { return filepath.Join(d.root, filepath.FromSlash(key)) }

// Put writes r to a temporary file and renames it onto key.
func (d *Disk) Put(ctx context.Context, key string, r io.Reader, size int64, opts PutOptions) (Info, error) {
	if err := checkKey("key", key); err != nil {
		return Info{}, err
	}
	if size < -1 {
		return Info{}, beamledger.InvalidField("size", "is negative (use -1 for unknown)")
	}
	if size >= 0 {
		r = newSizedReader(r, size)
	}
	tmp, err := d.writeTemp(ctx, func(w io.Writer) error {
		_, err := io.Copy(w, ctxReader(ctx, r))
		return err
	})
	if err != nil {
		return Info{}, err
	}
	return d.place(tmp, key)
}

// writeTemp creates a file in the temp folder, fills it with write, syncs and
// closes it, and returns its name. On any failure it removes the file.
func (d *Disk) writeTemp(ctx context.Context, write func(io.Writer) error) (name string, err error) {
	if err := ctx.Err(); err != nil {
		return "", err
	}
	f, err := os.CreateTemp(filepath.Join(d.root, diskTempDir), "put-*")
	if err != nil {
		return "", fmt.Errorf("objects: %w", err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	if err := write(f); err != nil {
		return "", err
	}
	// The data must be on disk before the rename makes it visible, or a
	// crash could leave the key naming an empty or partial file.
	if err := f.Sync(); err != nil {
		return "", fmt.Errorf("objects: %w", err)
	}
	if err := f.Close(); err != nil {
		return "", fmt.Errorf("objects: %w", err)
	}
	return f.Name(), nil
}

// place renames the file src onto key, creating the key's folders, and
// describes the result. src is removed if it cannot be placed.
func (d *Disk) place(src, key string) (Info, error) {
	dst := d.path(key)
	if err := d.rename(src, dst, "key"); err != nil {
		os.Remove(src)
		return Info{}, err
	}
	return d.stat(key)
}

// rename moves src onto dst and syncs dst's folder so the new name survives a
// crash. field names the destination key in errors.
func (d *Disk) rename(src, dst, field string) error {
	dir := filepath.Dir(dst)
	if err := os.MkdirAll(dir, 0o750); err != nil {
		if errors.Is(err, syscall.ENOTDIR) || errors.Is(err, fs.ErrExist) {
			return beamledger.Conflict("%s: a leading part of the key is already an object", field)
		}
		return fmt.Errorf("objects: %w", err)
	}
	if err := os.Rename(src, dst); err != nil {
		if errors.Is(err, syscall.EISDIR) || errors.Is(err, syscall.EEXIST) || errors.Is(err, syscall.ENOTEMPTY) {
			return beamledger.Conflict("%s: the key is the folder of other objects", field)
		}
		return fmt.Errorf("objects: %w", err)
	}
	return syncDir(dir)
}

// syncDir flushes a folder's entries (a rename is a change to the folder).
func syncDir(dir string) error {
	f, err := os.Open(dir)
	if err != nil {
		return fmt.Errorf("objects: %w", err)
	}
	err = f.Sync()
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("objects: %w", err)
	}
	return nil
}

// Open reads a range of the file. A range starting at the end reads nothing;
// one starting past the end is refused with ErrInvalid; one running past the
// end stops there.
func (d *Disk) Open(ctx context.Context, key string, offset, length int64) (io.ReadCloser, error) {
	if err := checkKey("key", key); err != nil {
		return nil, err
	}
	if err := checkRange(offset, length); err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	f, err := os.Open(d.path(key))
	if err != nil {
		return nil, d.fileError(err, key)
	}
	fi, err := f.Stat()
	if err == nil && fi.IsDir() {
		err = fs.ErrNotExist
	}
	if err != nil {
		f.Close()
		return nil, d.fileError(err, key)
	}
	if offset > fi.Size() {
		f.Close()
		return nil, rangeError(offset, fi.Size())
	}
	if length < 0 || offset+length > fi.Size() {
		length = fi.Size() - offset
	}
	return &sectionFile{Reader: io.NewSectionReader(f, offset, length), f: f}, nil
}

// rangeError refuses a read starting past the end of an object.
func rangeError(offset, size int64) error {
	return beamledger.InvalidField("offset", fmt.Sprintf("%d is past the end of the object (%d bytes)", offset, size))
}

// sectionFile reads a section of a file and closes the file.
type sectionFile struct {
	io.Reader
	f *os.File
}

func (s *sectionFile) Close() error { return s.f.Close() }

// Stat describes the file of key.
func (d *Disk) Stat(ctx context.Context, key string) (Info, error) {
	if err := checkKey("key", key); err != nil {
		return Info{}, err
	}
	if err := ctx.Err(); err != nil {
		return Info{}, err
	}
	return d.stat(key)
}

func (d *Disk) stat(key string) (Info, error) {
	fi, err := os.Stat(d.path(key))
	if err == nil && !fi.Mode().IsRegular() {
		err = fs.ErrNotExist
	}
	if err != nil {
		return Info{}, d.fileError(err, key)
	}
	return Info{Key: key, Size: fi.Size(), Modified: fi.ModTime()}, nil
}

// fileError turns "no such file" (also when a leading part of the key is a
// file, ENOTDIR) into ErrNotFound; other errors pass through.
func (d *Disk) fileError(err error, key string) error {
	if errors.Is(err, fs.ErrNotExist) || errors.Is(err, syscall.ENOTDIR) {
		return beamledger.NotFound("object " + key)
	}
	return fmt.Errorf("objects: %w", err)
}

// Delete removes the file of key.
func (d *Disk) Delete(ctx context.Context, key string) error {
	if err := checkKey("key", key); err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	fi, err := os.Lstat(d.path(key))
	if err != nil || fi.IsDir() {
		// Missing, or a folder of other objects: no object by that key.
		return nil
	}
	if err := os.Remove(d.path(key)); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("objects: %w", err)
	}
	return nil
}

// Promote renames the file of from onto to.
func (d *Disk) Promote(ctx context.Context, from, to string) error {
	if err := checkKey("from", from); err != nil {
		return err
	}
	if err := checkKey("to", to); err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	if _, err := d.stat(from); err != nil {
		return err
	}
	if from == to {
		return nil
	}
	return d.rename(d.path(from), d.path(to), "to")
}

// List walks the tree in key order, which is not the order a plain walk
// gives: "a-b" sorts before "a/b" as a key because '-' is below '/', while a
// walk of the root would visit folder "a" before file "a-b".
func (d *Disk) List(ctx context.Context, prefix string, fn func(Info) error) error {
	if err := checkPrefix(prefix); err != nil {
		return err
	}
	return d.listDir(ctx, "", prefix, fn)
}

// listDir lists the folder of keys starting with dirKey ("" for the root,
// else ending in '/').
func (d *Disk) listDir(ctx context.Context, dirKey, prefix string, fn func(Info) error) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	entries, err := os.ReadDir(filepath.Join(d.root, filepath.FromSlash(dirKey)))
	if errors.Is(err, fs.ErrNotExist) {
		return nil // removed while listing
	}
	if err != nil {
		return fmt.Errorf("objects: %w", err)
	}
	type entry struct {
		key string
		dir bool
	}
	var list []entry
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			continue // the store's own folders, or not a key
		}
		key := dirKey + e.Name()
		if e.IsDir() {
			key += "/"
		} else if !e.Type().IsRegular() {
			continue
		}
		// Keep a folder when a key under it may start with prefix.
		if strings.HasPrefix(key, prefix) || (e.IsDir() && strings.HasPrefix(prefix, key)) {
			list = append(list, entry{key, e.IsDir()})
		}
	}
	slices.SortFunc(list, func(a, b entry) int { return cmp.Compare(a.key, b.key) })
	for _, e := range list {
		if e.dir {
			err = d.listDir(ctx, e.key, prefix, fn)
		} else {
			err = d.listFile(e.key, fn)
		}
		if err != nil {
			return err
		}
	}
	return nil
}

// listFile calls fn for one object, unless it vanished since the folder was read.
func (d *Disk) listFile(key string, fn func(Info) error) error {
	info, err := d.stat(key)
	if errors.Is(err, beamledger.ErrNotFound) {
		return nil
	}
	if err != nil {
		return err
	}
	return fn(info)
}

// ctxReader stops reading once ctx is done, so a cancelled Put ends at the
// next read instead of copying the rest of a long stream.
func ctxReader(ctx context.Context, r io.Reader) io.Reader {
	return readerFunc(func(p []byte) (int, error) {
		if err := ctx.Err(); err != nil {
			return 0, err
		}
		return r.Read(p)
	})
}
