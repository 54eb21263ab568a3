package objects

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"

	"beamledger"
)

const (
	// DefaultPartSize is the part size of Put's multipart uploads when
	// S3Config.PartSize is zero. Put holds at most two parts in memory.
	DefaultPartSize = 16 << 20
	// s3MinPartSize is S3's least size of every part but the last.
	s3MinPartSize = 5 << 20
	// s3MaxPartSize is S3's greatest part size.
	s3MaxPartSize = 5 << 30
	// maxCopySize is the largest object one CopyObject request may copy;
	// beyond it Promote copies part by part (UploadPartCopy).
	maxCopySize = 5 << 30
)

// S3Config says where an S3 bucket is and how to use it.
type S3Config struct {
	// Endpoint is host:port, without a scheme ("s3.example.org", "127.0.0.1:7070").
	Endpoint string
	// Region is the bucket's region; empty lets minio-go ask the server.
	Region string
	// Bucket holds every object of the store.
	Bucket string
	// AccessKey and SecretKey sign every request (AWS signature version 4).
	AccessKey, SecretKey string
	// UseTLS speaks HTTPS to Endpoint.
	UseTLS bool
	// PathStyle addresses the bucket as Endpoint/Bucket, which servers on an
	// IP address or without wildcard DNS need. When false, minio-go uses
	// virtual-host addressing (Bucket.Endpoint) for endpoints it knows support
	// it, such as Amazon S3's, and path style for the rest.
	PathStyle bool
	// CreateBucket makes NewS3 create a missing bucket instead of failing.
	CreateBucket bool
	// ObjectLock creates the bucket with object locking on (only possible at
	// creation), and makes NewS3 refuse an existing bucket without it, so
	// that RetainUntil is never silently dropped where it was asked for.
	ObjectLock bool
	// PartSize is the part size of Put's multipart uploads (5 MiB to 5 GiB,
	// default DefaultPartSize). A Put holds two parts in memory, and an object
	// of unknown size can be at most 10 000 parts long: 156.25 GiB at the
	// default. Larger objects need their size passed to Put, a larger
	// PartSize, or the multipart methods.
	PartSize uint64
	// SignPayload signs every payload (AWS signature version 4, chunk by
	// chunk) instead of sending it unsigned with a CRC32C: for S3 servers
	// that take neither trailing checksums nor CRC32C. It hashes every byte
	// with SHA-256 once more on each side. See S3.
	SignPayload bool
	// MaxAttempts is how often a request is tried before its error is
	// returned; 0 means minio-go's default of 10, with back-off between tries
	// of up to a second.
	MaxAttempts int
}

// S3 keeps objects in one bucket of an S3-compatible server.
//
// Put streams: a size that fits in one part goes up as one PUT read straight
// from the reader; anything larger (and every unknown size) as a multipart
// upload through two buffers of one part each: the next part is read from the
// source while the one before is sent, so a Put holds at most twice PartSize
// bytes of the object in memory whatever its size. A failed or cancelled
// multipart Put is aborted by minio-go, with a context of its own.
//
// Every write carries a CRC32C of its bytes (of each part, for multipart
// writes) that the S3 server checks before it keeps them, and the payload
// itself is not signed: signing it (minio-go's default without TLS) hashes
// every byte with SHA-256 once more on each side: on two cores that also hash
// the upload for its content address, the upload endpoint went from about 155
// to about 220 MB/s without it. A byte changed on the way is refused by the
// server (BadDigest), and Put and PutPart report it as ErrUnavailable, to be
// tried again; TestS3RefusesBytesChangedOnTheWay holds the store to that.
// (REFERENCE.md §4 notes trailing checksums refused by versitygw v1.8.0 with
// a signed payload; with an unsigned one it checks and keeps them.) Without
// TLS the request is still signed, but a party on the network could replace
// a body with one of its own and a matching CRC32C; the SHA-256 callers keep
// for the content (S3 has none for multipart objects) is what scrubbing
// checks. Use TLS on any network that is not trusted. With
// S3Config.SignPayload the payloads are signed instead (minio-go's default),
// for servers that take no checksums; a changed byte then fails the
// signature, reported the same way.
type S3 struct {
	client   *minio.Client
	core     minio.Core
	bucket   string
	partSize uint64
	// locking records whether the bucket has object locking, found out by
	// NewS3: RetainUntil is applied only then.
	locking bool
	// sign is S3Config.SignPayload.
	sign bool
}

var _ Store = (*S3)(nil)

// NewS3 connects to the bucket, creating it when missing and
// cfg.CreateBucket is set, and finds out whether it has object locking. It
// returns ErrUnavailable when the server cannot be reached.
func NewS3(ctx context.Context, cfg S3Config) (*S3, error) {
	if cfg.PartSize == 0 {
		cfg.PartSize = DefaultPartSize
	}
	if err := cfg.validate(); err != nil {
		return nil, err
	}
	lookup := minio.BucketLookupAuto
	if cfg.PathStyle {
		lookup = minio.BucketLookupPath
	}
	client, err := minio.New(cfg.Endpoint, &minio.Options{
		Creds:        credentials.NewStaticV4(cfg.AccessKey, cfg.SecretKey, ""),
		Secure:       cfg.UseTLS,
		Region:       cfg.Region,
		BucketLookup: lookup,
		MaxRetries:   cfg.MaxAttempts,
		// Trailing headers carry a single PUT's CRC32C, computed while the
		// body is sent, and let a multipart upload declare its checksum.
		TrailingHeaders: !cfg.SignPayload,
	})
	if err != nil {
		return nil, fmt.Errorf("objects: S3 endpoint %q: %w", cfg.Endpoint, err)
	}
	s := &S3{client: client, core: minio.Core{Client: client}, bucket: cfg.Bucket, partSize: cfg.PartSize, sign: cfg.SignPayload}
	if err := s.prepareBucket(ctx, cfg); err != nil {
		return nil, err
	}
	return s, nil
}

func (cfg S3Config) validate() error {
	var f beamledger.FieldErrors = map[string]string{}
	if cfg.Endpoint == "" || strings.Contains(cfg.Endpoint, "://") {
		f.Add("endpoint", "must be host:port without a scheme")
	}
	if cfg.Bucket == "" {
		f.Add("bucket", "is empty")
	}
	if cfg.PartSize < s3MinPartSize || cfg.PartSize > s3MaxPartSize {
		f.Add("part_size", "must be 5 MiB to 5 GiB")
	}
	if cfg.MaxAttempts < 0 {
		f.Add("max_attempts", "is negative")
	}
	return f.Err()
}

// prepareBucket creates the bucket if asked to and learns whether it locks.
func (s *S3) prepareBucket(ctx context.Context, cfg S3Config) error {
	exists, err := s.client.BucketExists(ctx, s.bucket)
	if err != nil {
		return mapS3Error(err, "bucket "+s.bucket)
	}
	if !exists {
		if !cfg.CreateBucket {
			return fmt.Errorf("objects: bucket %q does not exist on %s", s.bucket, cfg.Endpoint)
		}
		err := s.client.MakeBucket(ctx, s.bucket, minio.MakeBucketOptions{Region: cfg.Region, ObjectLocking: cfg.ObjectLock})
		// Another process may have created it since BucketExists.
		if code := minio.ToErrorResponse(err).Code; err != nil && code != "BucketAlreadyOwnedByYou" {
			return mapS3Error(err, "bucket "+s.bucket)
		}
	}
	status, _, _, _, err := s.client.GetObjectLockConfig(ctx, s.bucket)
	switch {
	case err == nil:
		s.locking = status == "Enabled"
	case isUnavailable(err):
		return mapS3Error(err, "bucket "+s.bucket)
	default:
		// ObjectLockConfigurationNotFoundError, or a server that has no
		// object locking at all (NotImplemented): no locking either way.
		s.locking = false
	}
	if cfg.ObjectLock && !s.locking {
		return fmt.Errorf("objects: bucket %q has no object locking, which can only be turned on when a bucket is created", s.bucket)
	}
	return nil
}

// Name returns "s3://" and the bucket.
func (s *S3) Name() string { return "s3://" + s.bucket }

// ObjectLocking reports whether the bucket protects objects: only then does
// PutOptions.RetainUntil take effect.
func (s *S3) ObjectLocking() bool { return s.locking }

// MinPartSize is S3's 5 MiB.
func (s *S3) MinPartSize() int64 { return s3MinPartSize }

// partSizeFor is the configured part size, raised for a known size that
// would otherwise need more than S3's 10 000 parts.
func (s *S3) partSizeFor(size int64) uint64 {
	ps := s.partSize
	if size > 0 {
		const mib = 1 << 20
		need := (uint64(size) + maxPartNumber - 1) / maxPartNumber
		need = (need + mib - 1) / mib * mib
		ps = max(ps, need)
	}
	return ps
}

// retention returns the lock options for RetainUntil: governance mode (or
// compliance mode when asked) when the bucket locks, nothing otherwise
// (documented on PutOptions).
func (s *S3) retention(opts PutOptions) (minio.RetentionMode, time.Time) {
	if !s.locking || opts.RetainUntil.IsZero() {
		return "", time.Time{}
	}
	if opts.Compliance {
		return minio.Compliance, opts.RetainUntil.UTC()
	}
	return minio.Governance, opts.RetainUntil.UTC()
}

// Put uploads r. The reader is wrapped, which also hides any io.ReaderAt
// from minio-go: with one, it would upload several parts at once, each
// reading the source concurrently.
func (s *S3) Put(ctx context.Context, key string, r io.Reader, size int64, opts PutOptions) (Info, error) {
	if err := checkKey("key", key); err != nil {
		return Info{}, err
	}
	if size < -1 {
		return Info{}, beamledger.InvalidField("size", "is negative (use -1 for unknown)")
	}
	// The context is checked before each read: otherwise a cancelled Put whose source
	// goes on giving bytes could still send them all, and the server would keep the
	// object the caller gave up on.
	if size >= 0 {
		r = ctxReader(ctx, newSizedReader(r, size))
	} else {
		r = ctxReader(ctx, r)
	}
	ps := s.partSizeFor(size)
	po := minio.PutObjectOptions{
		ContentType: opts.ContentType,
		PartSize:    ps,
		NumThreads:  1,
	}
	if !s.sign {
		// Unsigned payload with CRC32C per part (see S3).
		po.DisableContentSha256, po.Checksum = true, minio.ChecksumCRC32C
	}
	if size < 0 || uint64(size) > ps {
		// Two part buffers: the next part is read from the source while the one
		// before is sent, so a slow source (a request body being hashed) and the
		// upload overlap instead of taking turns.
		po.NumThreads, po.ConcurrentStreamParts = 2, true
	}
	po.Mode, po.RetainUntilDate = s.retention(opts)
	if _, err := s.client.PutObject(ctx, s.bucket, key, r, size, po); err != nil {
		return Info{}, mapWriteError(err, "object "+key)
	}
	return s.stat(ctx, key)
}

// Open reads a range with one GET. S3 answers a range starting at or past
// the end with 416; the store then looks at the size to tell "at the end"
// (nothing to read) from "past it" (ErrInvalid), as Disk does.
func (s *S3) Open(ctx context.Context, key string, offset, length int64) (io.ReadCloser, error) {
	if err := checkKey("key", key); err != nil {
		return nil, err
	}
	if err := checkRange(offset, length); err != nil {
		return nil, err
	}
	if length == 0 {
		return s.openEmpty(ctx, key, offset)
	}
	var o minio.GetObjectOptions
	switch {
	case offset == 0 && length < 0:
	case length < 0:
		err := o.SetRange(offset, 0)
		if err != nil {
			return nil, err
		}
	default:
		if err := o.SetRange(offset, offset+length-1); err != nil {
			return nil, err
		}
	}
	rc, _, _, err := s.core.GetObject(ctx, s.bucket, key, o)
	if minio.ToErrorResponse(err).Code == "InvalidRange" {
		return s.openEmpty(ctx, key, offset)
	}
	if err != nil {
		return nil, mapS3Error(err, "object "+key)
	}
	return rc, nil
}

// openEmpty returns an empty reader for a range that starts at the end of
// the object (or has no length), and refuses one that starts past it.
func (s *S3) openEmpty(ctx context.Context, key string, offset int64) (io.ReadCloser, error) {
	info, err := s.stat(ctx, key)
	if err != nil {
		return nil, err
	}
	if offset > info.Size {
		return nil, rangeError(offset, info.Size)
	}
	return io.NopCloser(strings.NewReader("")), nil
}

// Stat asks the server for the object's size and time (HEAD).
func (s *S3) Stat(ctx context.Context, key string) (Info, error) {
	if err := checkKey("key", key); err != nil {
		return Info{}, err
	}
	return s.stat(ctx, key)
}

func (s *S3) stat(ctx context.Context, key string) (Info, error) {
	oi, err := s.client.StatObject(ctx, s.bucket, key, minio.StatObjectOptions{})
	if err != nil {
		return Info{}, mapS3Error(err, "object "+key)
	}
	return Info{Key: key, Size: oi.Size, Modified: oi.LastModified}, nil
}

// Delete removes the object. In a bucket with object locking, a versioning
// server adds a delete marker and keeps versions under retention; a server
// without versioning (versitygw's POSIX back end) refuses to delete a
// retained object, with an AccessDenied error passed through as is.
func (s *S3) Delete(ctx context.Context, key string) error {
	if err := checkKey("key", key); err != nil {
		return err
	}
	err := s.client.RemoveObject(ctx, s.bucket, key, minio.RemoveObjectOptions{})
	if err = mapS3Error(err, "object "+key); errors.Is(err, beamledger.ErrNotFound) {
		return nil
	}
	return err
}

// Promote copies on the server, then deletes the source. The copy keeps the
// source's content type and, in a locking bucket, its retention, so that
// promoting a protected upload does not yield an unprotected object; the
// source is then deleted bypassing governance retention, which the access
// key must be allowed (s3:BypassGovernanceRetention).
func (s *S3) Promote(ctx context.Context, from, to string) error {
	if err := checkKey("from", from); err != nil {
		return err
	}
	if err := checkKey("to", to); err != nil {
		return err
	}
	oi, err := s.client.StatObject(ctx, s.bucket, from, minio.StatObjectOptions{})
	if err != nil {
		return mapS3Error(err, "object "+from)
	}
	if from == to {
		return nil
	}
	dst := minio.CopyDestOptions{Bucket: s.bucket, Object: to}
	if s.locking {
		dst.Mode, dst.RetainUntilDate = retentionOf(oi)
	}
	src := minio.CopySrcOptions{Bucket: s.bucket, Object: from}
	if oi.Size > maxCopySize {
		_, err = s.client.ComposeObject(ctx, dst, src)
	} else {
		_, err = s.client.CopyObject(ctx, dst, src)
	}
	if err != nil {
		return mapS3Error(err, "object "+from)
	}
	// The source's retention has moved to the copy, so it may go despite
	// its own: a server without versioning (versitygw's POSIX back end)
	// otherwise refuses the delete with AccessDenied, while a versioning
	// one only adds a delete marker and keeps the old version either way.
	err = s.client.RemoveObject(ctx, s.bucket, from, minio.RemoveObjectOptions{GovernanceBypass: s.locking})
	if err = mapS3Error(err, "object "+from); errors.Is(err, beamledger.ErrNotFound) {
		return nil
	}
	return err
}

// retentionOf reads an object's retention from its HEAD answer. The
// GetObjectRetention call would be the obvious way, but versitygw v1.8.0
// answers it with an <ObjectLockRetention> document where minio-go v7.4.1
// expects <Retention>, and the call fails to parse; the lock headers on HEAD
// carry the same facts and cost no extra request.
func retentionOf(oi minio.ObjectInfo) (minio.RetentionMode, time.Time) {
	mode := minio.RetentionMode(strings.ToUpper(oi.Metadata.Get("X-Amz-Object-Lock-Mode")))
	until, err := time.Parse(time.RFC3339, oi.Metadata.Get("X-Amz-Object-Lock-Retain-Until-Date"))
	if !mode.IsValid() || err != nil {
		return "", time.Time{}
	}
	return mode, until
}

// List pages through ListObjectsV2; S3 returns keys in binary order, which
// for the plain keys this package allows is the order Disk gives.
func (s *S3) List(ctx context.Context, prefix string, fn func(Info) error) error {
	if err := checkPrefix(prefix); err != nil {
		return err
	}
	// Cancelling stops minio-go's listing goroutine when fn stops early.
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	for oi := range s.client.ListObjects(ctx, s.bucket, minio.ListObjectsOptions{Prefix: prefix, Recursive: true}) {
		if oi.Err != nil {
			return mapS3Error(oi.Err, "bucket "+s.bucket)
		}
		if err := fn(Info{Key: oi.Key, Size: oi.Size, Modified: oi.LastModified}); err != nil {
			return err
		}
	}
	return ctx.Err()
}
