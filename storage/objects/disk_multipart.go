package objects

import (
	"context"
	"crypto/md5"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"beamledger"
)

// maxPartNumber is S3's highest part number, kept on disk so that callers
// written against one store work against the other.
const maxPartNumber = 10000

// uploadKeyFile, inside an upload's folder, holds the key the upload is for.
const uploadKeyFile = "key"

// CreateMultipart makes a folder for the upload's parts, named by a random id.
func (d *Disk) CreateMultipart(ctx context.Context, key string) (string, error) {
	if err := checkKey("key", key); err != nil {
		return "", err
	}
	if err := ctx.Err(); err != nil {
		return "", err
	}
	id := rand.Text()
	dir := d.uploadDir(id)
	if err := os.Mkdir(dir, 0o750); err != nil {
		return "", fmt.Errorf("objects: %w", err)
	}
	if err := os.WriteFile(filepath.Join(dir, uploadKeyFile), []byte(key), 0o640); err != nil {
		os.RemoveAll(dir)
		return "", fmt.Errorf("objects: %w", err)
	}
	return id, nil
}

func (d *Disk) uploadDir(id string) string { return filepath.Join(d.root, diskUploadsDir, id) }

func partName(n int) string { return fmt.Sprintf("part-%05d", n) }

// openUpload returns the folder of upload id after checking that it exists
// and is for key; a wrong key is as good as a missing upload, as on S3.
func (d *Disk) openUpload(key, id string) (string, error) {
	if err := checkKey("key", key); err != nil {
		return "", err
	}
	// rand.Text ids are base32; anything else cannot be ours and must not
	// reach the file system as a path.
	if id == "" || strings.Trim(id, "ABCDEFGHIJKLMNOPQRSTUVWXYZ234567") != "" {
		return "", beamledger.NotFound("upload " + id)
	}
	dir := d.uploadDir(id)
	raw, err := os.ReadFile(filepath.Join(dir, uploadKeyFile))
	if err != nil || string(raw) != key {
		return "", beamledger.NotFound("upload " + id)
	}
	return dir, nil
}

// PutPart writes the part to a temporary file in the upload's folder and
// renames it into place, replacing an earlier part with the same number. Its
// ETag is the hex MD5 of its bytes, as S3 gives for a plain part.
func (d *Disk) PutPart(ctx context.Context, key, uploadID string, n int, r io.Reader, size int64) (Part, error) {
	dir, err := d.openUpload(key, uploadID)
	if err != nil {
		return Part{}, err
	}
	if n < 1 || n > maxPartNumber {
		return Part{}, beamledger.InvalidField("part", fmt.Sprintf("number must be 1 to %d", maxPartNumber))
	}
	if size < 0 {
		return Part{}, beamledger.InvalidField("size", "is negative; a part's size must be known")
	}
	if err := ctx.Err(); err != nil {
		return Part{}, err
	}
	f, err := os.CreateTemp(dir, "tmp-*")
	if err != nil {
		return Part{}, fmt.Errorf("objects: %w", err)
	}
	h := md5.New()
	_, err = io.Copy(io.MultiWriter(f, h), ctxReader(ctx, newSizedReader(r, size)))
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(f.Name(), filepath.Join(dir, partName(n)))
	}
	if err != nil {
		os.Remove(f.Name())
		if errors.Is(err, fs.ErrNotExist) {
			return Part{}, beamledger.NotFound("upload " + uploadID) // aborted meanwhile
		}
		return Part{}, err
	}
	return Part{Number: n, ETag: hex.EncodeToString(h.Sum(nil)), Size: size}, nil
}

// CompleteMultipart joins the listed parts into a temporary file, renames it
// onto key and removes the upload. The parts must be listed in increasing
// order of number with the ETags PutPart returned, as S3 requires.
func (d *Disk) CompleteMultipart(ctx context.Context, key, uploadID string, parts []Part, opts PutOptions) (Info, error) {
	dir, err := d.openUpload(key, uploadID)
	if err != nil {
		return Info{}, err
	}
	files, err := d.checkParts(dir, parts)
	if err != nil {
		return Info{}, err
	}
	tmp, err := d.writeTemp(ctx, func(w io.Writer) error {
		for _, name := range files {
			if err := appendFile(ctx, w, name); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return Info{}, err
	}
	info, err := d.place(tmp, key)
	if err != nil {
		return Info{}, err
	}
	// The object is in place; a folder left behind only shows as a pending
	// upload until someone aborts it.
	if err := os.RemoveAll(dir); err != nil {
		return Info{}, fmt.Errorf("objects: object stored but its upload not removed: %w", err)
	}
	return info, nil
}

// checkParts checks the list a caller completes with against the parts on
// disk and returns the parts' files in order.
func (d *Disk) checkParts(dir string, parts []Part) ([]string, error) {
	if len(parts) == 0 {
		return nil, beamledger.InvalidField("parts", "none given")
	}
	files := make([]string, len(parts))
	for i, p := range parts {
		if i > 0 && p.Number <= parts[i-1].Number {
			return nil, beamledger.InvalidField("parts", "not in increasing order of number")
		}
		name := filepath.Join(dir, partName(p.Number))
		etag, size, err := fileMD5(name)
		if errors.Is(err, fs.ErrNotExist) || (err == nil && etag != strings.Trim(p.ETag, `"`)) {
			return nil, beamledger.InvalidField("parts", fmt.Sprintf("part %d was not uploaded or its ETag does not match", p.Number))
		}
		if err != nil {
			return nil, err
		}
		if i < len(parts)-1 && size < d.MinPartSize() {
			return nil, beamledger.InvalidField("parts", fmt.Sprintf("part %d is smaller than the least part size", p.Number))
		}
		files[i] = name
	}
	return files, nil
}

// fileMD5 returns a file's hex MD5 and size. Hashing again at completion
// costs a read of each part but keeps no state beside the parts themselves.
func fileMD5(name string) (string, int64, error) {
	f, err := os.Open(name)
	if err != nil {
		return "", 0, err
	}
	defer f.Close()
	h := md5.New()
	n, err := io.Copy(h, f)
	if err != nil {
		return "", 0, fmt.Errorf("objects: %w", err)
	}
	return hex.EncodeToString(h.Sum(nil)), n, nil
}

func appendFile(ctx context.Context, w io.Writer, name string) error {
	f, err := os.Open(name)
	if err != nil {
		return fmt.Errorf("objects: %w", err)
	}
	defer f.Close()
	_, err = io.Copy(w, ctxReader(ctx, f))
	return err
}

// AbortMultipart removes the upload's folder.
func (d *Disk) AbortMultipart(ctx context.Context, key, uploadID string) error {
	dir, err := d.openUpload(key, uploadID)
	if errors.Is(err, beamledger.ErrNotFound) {
		return nil
	}
	if err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	if err := os.RemoveAll(dir); err != nil {
		return fmt.Errorf("objects: %w", err)
	}
	return nil
}

// ListMultipart reads every upload folder. An upload's initiation time is its
// key file's modification time: the folder's own changes with every part
// renamed into it.
func (d *Disk) ListMultipart(ctx context.Context, prefix string) ([]PendingUpload, error) {
	if err := checkPrefix(prefix); err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	entries, err := os.ReadDir(filepath.Join(d.root, diskUploadsDir))
	if err != nil {
		return nil, fmt.Errorf("objects: %w", err)
	}
	var out []PendingUpload
	for _, e := range entries {
		name := filepath.Join(d.root, diskUploadsDir, e.Name(), uploadKeyFile)
		raw, err := os.ReadFile(name)
		if err != nil {
			continue // being created or removed
		}
		fi, err := os.Stat(name)
		if err != nil {
			continue
		}
		if key := string(raw); strings.HasPrefix(key, prefix) {
			out = append(out, PendingUpload{Key: key, UploadID: e.Name(), Initiated: fi.ModTime()})
		}
	}
	// S3 lists by key, then by initiation.
	slices.SortFunc(out, func(a, b PendingUpload) int {
		if c := strings.Compare(a.Key, b.Key); c != 0 {
			return c
		}
		return a.Initiated.Compare(b.Initiated)
	})
	return out, nil
}
