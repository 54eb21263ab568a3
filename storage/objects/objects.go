// Package objects keeps data files' bytes: an S3-compatible object store (through
// minio-go, the only importer of it) or a directory on local disk, behind one
// interface with one conformance suite run against both.
//
// Objects are immutable. Keys are chosen by the caller (content addresses such as
// "sha256/ab/abcd…", or "incoming/<id>" for bytes whose digest is not yet known) and
// are plain: ASCII letters, digits, '/', '-', '_' and '.', at most 1024 bytes, made
// of '/'-separated segments that are non-empty, at most 255 bytes and do not start
// with '.' (so no leading, trailing or doubled '/', no "." or ".."). Both stores
// refuse other keys alike, so a key that works in development works in production.
// One key cannot be both an object and a folder of others ("a" and "a/b"): the
// disk store, and S3 servers with a POSIX back end, keep keys as paths.
//
// Errors are domain errors: beamledger.ErrNotFound for a missing object or upload,
// beamledger.ErrUnavailable (with a message saying the object store could not be
// reached) when the store is down or times out, beamledger.ErrInvalid for a bad key,
// range or list of parts. Anything else is unexpected.
//
// What versitygw v1.8.0 (POSIX back end) did with minio-go v7.4.1 that one would
// not expect, found by the conformance suite; keep it in mind when changing either:
//
//   - GetObjectRetention fails to parse: the server answers <ObjectLockRetention>
//     where minio-go expects <Retention>. The lock headers of a HEAD say the same.
//   - Without a versioning folder the server keeps no versions, so a retained
//     object cannot be deleted without bypassing governance (S3 proper would add a
//     delete marker), and version listings say "null" but "null" is refused as a
//     version to delete.
//   - Objects uploaded with minio-go's streaming signature (plain HTTP) keep
//     "Content-Encoding: aws-chunked" in their metadata and answer GETs with it.
//     Go clients ignore it; a browser following a presigned URL may not.
//   - CompleteMultipartUpload to an aborted upload with a malformed ETag says
//     InvalidPart, not NoSuchUpload: the ETags are checked first.
//   - A range starting at or past the end is refused with 416 InvalidRange, also
//     for an empty object, as S3 does; Open turns "at the end" into empty reads.
//   - Object listings are in key order ('-' and '.' before '/'), as on S3, though
//     the objects are files in folders.
package objects

import (
	"context"
	"io"
	"time"
)

// Info describes a stored object.
type Info struct {
	Key      string
	Size     int64
	Modified time.Time
}

// PutOptions are optional behaviours of Put and CompleteMultipart.
type PutOptions struct {
	// ContentType is stored with the object where the store keeps one.
	ContentType string
	// RetainUntil, when set and the store supports object locking, protects the object
	// in governance mode until then (a privileged caller may still lift it).
	RetainUntil time.Time
	// Compliance makes RetainUntil's protection compliance mode: nobody, an
	// administrator included, can delete the object or shorten its retention before
	// then. For records that must outlive any account's mistakes (signed checkpoints).
	Compliance bool
}

// Part is one uploaded part of a multipart upload.
type Part struct {
	Number int
	ETag   string
	Size   int64
}

// PendingUpload is a multipart upload begun and neither completed nor aborted.
type PendingUpload struct {
	Key       string
	UploadID  string
	Initiated time.Time
}

// Store is where data files' bytes live.
type Store interface {
	// Name says which store this is, for records and logs ("s3://bucket", "file:///srv/objects").
	Name() string
	// Put writes an object from r: size bytes, or -1 when unknown. The object appears
	// only once all of it is written; a failed or cancelled Put leaves no object (and
	// no parts behind). Memory use does not grow with size. A reader that ends before
	// size bytes is ErrInvalid; bytes after the first size are not read.
	Put(ctx context.Context, key string, r io.Reader, size int64, opts PutOptions) (Info, error)
	// Open reads length bytes from offset (length -1: to the end). A range running
	// past the end stops there; one starting at the end reads nothing; one starting
	// past it, a negative offset or a length below -1 is ErrInvalid.
	Open(ctx context.Context, key string, offset, length int64) (io.ReadCloser, error)
	// Stat describes an object.
	Stat(ctx context.Context, key string) (Info, error)
	// Delete removes an object; a missing one is not an error.
	Delete(ctx context.Context, key string) error
	// Promote gives an object a new key and removes the old one: a rename on disk, a
	// server-side copy then delete on S3. An existing object at to is replaced.
	Promote(ctx context.Context, from, to string) error
	// List calls fn for each object whose key starts with prefix, in key order; fn's
	// error stops the listing and is returned.
	List(ctx context.Context, prefix string, fn func(Info) error) error

	// MinPartSize is the least size of every part but the last (5 MiB on S3).
	MinPartSize() int64
	// CreateMultipart begins a multipart upload to key.
	CreateMultipart(ctx context.Context, key string) (uploadID string, err error)
	// PutPart stores part number n (1 to 10 000) of size bytes from r, replacing an
	// earlier part n. An unknown upload is ErrNotFound. An r that can seek may be
	// read through first (to check-sum the part before sending it) and is left
	// past the part.
	PutPart(ctx context.Context, key, uploadID string, n int, r io.Reader, size int64) (Part, error)
	// CompleteMultipart joins the parts, in order, into the object. parts must be in
	// increasing order of number, with the ETags PutPart returned, and every part but
	// the last at least MinPartSize; otherwise it returns ErrInvalid and the upload
	// stays pending.
	CompleteMultipart(ctx context.Context, key, uploadID string, parts []Part, opts PutOptions) (Info, error)
	// AbortMultipart discards an upload and its parts; an unknown one is not an error.
	AbortMultipart(ctx context.Context, key, uploadID string) error
	// ListMultipart lists the pending uploads whose keys start with prefix.
	ListMultipart(ctx context.Context, prefix string) ([]PendingUpload, error)
}
