package provenance

import (
	"context"
	"encoding/base64"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"beamledger"
)

// Upload is a resumable upload of one data file (tus 1.0) under way. Its bytes go
// to a multipart upload in the object store part by part; a part not yet full lives
// in segment objects (see UploadSegmentKey) until it is. Offset counts only bytes
// that are durably stored (or, for bytes the store holds already, durably hashed),
// so a client resuming from it never skips a byte the server lost.
type Upload struct {
	ID         string
	DataFileID string
	ProjectID  string
	// Store and ObjectKey say where the bytes go: the content address when the
	// client declared the digest, else "incoming/<upload id>", promoted once the
	// digest is known.
	Store     string
	ObjectKey string
	// MultipartID is the store's multipart upload; empty when the declared bytes
	// were already stored at creation and are only read and checked.
	MultipartID string
	LengthBytes int64
	OffsetBytes int64
	// PartSizeBytes is fixed at creation; every part but the last has this size.
	PartSizeBytes int64
	Parts         []UploadPart
	// Segments hold the bytes of the part being filled, in order, from the end of
	// the last part to OffsetBytes.
	Segments []UploadSegment
	// HashState is crypto/sha256's marshalled state after OffsetBytes bytes.
	HashState      []byte
	DeclaredSHA256 string
	MediaType      string
	CreatedBy      string
	CreatedAt      time.Time
	LastActivity   time.Time
}

// UploadPart is a part stored in the multipart upload.
type UploadPart struct {
	Number    int    `json:"number"`
	ETag      string `json:"etag"`
	SizeBytes int64  `json:"size"`
}

// UploadSegment is a stored run of bytes of the part being filled.
type UploadSegment struct {
	OffsetBytes int64 `json:"offset"`
	SizeBytes   int64 `json:"size"`
}

// VerifyOnly reports whether the upload's bytes are only hashed and checked: the
// store held the declared bytes already when the upload began.
func (u Upload) VerifyOnly() bool { return u.MultipartID == "" }

// PartStart is where the part being filled begins.
func (u Upload) PartStart() int64 { return int64(len(u.Parts)) * u.PartSizeBytes }

// PartEnd is where the part being filled ends: a whole part on, or the end of the file.
func (u Upload) PartEnd() int64 { return min(u.PartStart()+u.PartSizeBytes, u.LengthBytes) }

// UploadSegmentKey is the object holding the bytes of an upload's unfinished part
// that begin at offset. Naming it by its offset means that a segment rewritten
// longer replaces the shorter one at once, and one written by a request that died
// before recording it is overwritten by the retry rather than mistaken for data.
func UploadSegmentKey(uploadID string, offset int64) string {
	return UploadSegmentPrefix(uploadID) + strconv.FormatInt(offset, 10)
}

// UploadSegmentPrefix is the folder of an upload's segments.
func UploadSegmentPrefix(uploadID string) string { return "uploads/" + uploadID + "/" }

// IncomingKey is where the bytes of an upload without a declared digest gather
// until their digest is known.
func IncomingKey(uploadID string) string { return "incoming/" + uploadID }

// MaxUploadParts is S3's limit on the parts of one multipart upload.
const MaxUploadParts = 10000

// UploadPartSize is the part size for a file of length bytes: the segment size
// (the most a request holds in memory), or a whole multiple of it when the file
// needs more than maxParts parts of that size. Parts larger than a segment are
// assembled from segment objects, so memory never grows with the file.
func UploadPartSize(length, segment, maxParts int64) int64 {
	per := (length + maxParts - 1) / maxParts
	n := max(1, (per+segment-1)/segment)
	return n * segment
}

// UploadMetadata is what a tus client says of the file at creation.
type UploadMetadata struct {
	Target FileTarget
	// SHA256 is the declared digest, lower-case hex, or "".
	SHA256 string
}

// ParseUploadMetadata reads a tus Upload-Metadata header: comma-separated pairs of a
// key and a base64 value (a key alone has an empty value). The keys read are
// filename, acquisition_id or project_id, media_type and sha256 (hex); others are
// ignored, as tus asks. Errors name the header.
func ParseUploadMetadata(header string) (UploadMetadata, error) {
	kv := map[string]string{}
	for pair := range strings.SplitSeq(header, ",") {
		pair = strings.TrimSpace(pair)
		if pair == "" {
			continue
		}
		key, enc, _ := strings.Cut(pair, " ")
		if _, dup := kv[key]; dup || key == "" {
			return UploadMetadata{}, beamledger.InvalidField("Upload-Metadata", fmt.Sprintf("key %q is empty or repeated", key))
		}
		v, err := base64.StdEncoding.DecodeString(strings.TrimSpace(enc))
		if err != nil {
			return UploadMetadata{}, beamledger.InvalidField("Upload-Metadata", fmt.Sprintf("the value of %q is not base64", key))
		}
		kv[key] = string(v)
	}
	m := UploadMetadata{Target: FileTarget{AcquisitionID: kv["acquisition_id"], ProjectID: kv["project_id"],
		FileName: kv["filename"], MediaType: kv["media_type"]}}
	if err := m.Target.Normalize(); err != nil {
		return m, metadataError(err)
	}
	if d := strings.ToLower(kv["sha256"]); d != "" {
		if !ValidSHA256(d) {
			return m, beamledger.InvalidField("Upload-Metadata", "sha256 must be 64 hex digits")
		}
		m.SHA256 = d
	}
	return m, nil
}

// metadataError renames FileTarget's field errors to the metadata keys a tus
// client sent them under.
func metadataError(err error) error {
	var de *beamledger.Error
	if !errors.As(err, &de) {
		return err
	}
	rename := map[string]string{"name": "filename", "Content-Type": "media_type"}
	fields := map[string]string{}
	var words []string
	for k, v := range de.Fields {
		if r, ok := rename[k]; ok {
			k = r
		}
		fields["Upload-Metadata"] = k + ": " + v
		words = append(words, k+": "+v)
	}
	return beamledger.Invalid("Upload-Metadata: "+strings.Join(words, "; "), fields)
}

// NewUpload is an upload about to begin: its pending file record and where its
// bytes go.
type NewUpload struct {
	File           NewDataFile // SHA256 and SizeBytes unset
	ObjectKey      string
	MultipartID    string
	LengthBytes    int64
	PartSizeBytes  int64
	HashState      []byte
	DeclaredSHA256 string
}

// UploadProgress is what a request durably added to an upload.
type UploadProgress struct {
	OffsetBytes int64
	Parts       []UploadPart
	Segments    []UploadSegment
	HashState   []byte
}

// UploadStore persists resumable uploads.
type UploadStore interface {
	// CreateUpload records a pending data file and its upload, with id as the
	// upload's id. ErrInvalid when the acquisition does not exist.
	CreateUpload(ctx context.Context, id string, n NewUpload, now time.Time) (Upload, error)
	// Upload returns one upload. ErrNotFound when none.
	Upload(ctx context.Context, id string) (Upload, error)
	// LeaseUpload takes the upload for one request, as token, until lease from
	// now: ErrConflict while another request holds it, ErrNotFound when the
	// upload is gone. The upload returned is as the lease found it.
	LeaseUpload(ctx context.Context, id, token string, lease time.Duration, now time.Time) (Upload, error)
	// RenewUpload extends token's lease; ErrConflict when another request took it.
	RenewUpload(ctx context.Context, id, token string, lease time.Duration, now time.Time) error
	// SaveUploadProgress records progress under token's lease and renews it;
	// ErrConflict when the lease was lost.
	SaveUploadProgress(ctx context.Context, id, token string, p UploadProgress, lease time.Duration, now time.Time) error
	// DeclareUploadDigest records, under token's lease, the SHA-256 the client
	// declares for the whole file when it did not declare one at creation;
	// ErrConflict when the lease was lost.
	DeclareUploadDigest(ctx context.Context, id, token, sha256Hex string) error
	// ReleaseUpload gives the lease back; a lost lease is not an error.
	ReleaseUpload(ctx context.Context, id, token string) error
	// FinishUpload turns the pending record into a stored one and removes the
	// upload. When the same bytes are already recorded for the acquisition (or
	// project), the pending record is removed instead and the existing one is
	// returned with created false.
	FinishUpload(ctx context.Context, id string, n NewDataFile, now time.Time) (f DataFile, created bool, err error)
	// DeleteUpload removes an upload and its pending record.
	DeleteUpload(ctx context.Context, id string) error
	// ClaimExpiredUploads removes the uploads whose last activity is before
	// idleBefore and that no request holds, with their pending records, and
	// returns them so their stored parts can be discarded.
	ClaimExpiredUploads(ctx context.Context, idleBefore time.Time, limit int) ([]Upload, error)
	// UploadIDs reports which of the given ids are uploads still recorded.
	UploadIDs(ctx context.Context, ids []string) (map[string]bool, error)
	// UploadMultipartIDs returns the store multipart ids of every recorded upload.
	UploadMultipartIDs(ctx context.Context) (map[string]bool, error)
}
