package provenance

import (
	"context"
	"encoding/base64"
	"encoding/hex"
	"errors"
	"mime"
	"path"
	"regexp"
	"strings"
	"time"
	"unicode/utf8"

	"beamledger"
	"beamledger/accounts"
)

// FileStatus is where a data file is in its life.
type FileStatus string

// File statuses. A file is stored only once its bytes are in the object store and
// their SHA-256 and size are known and, when the client declared a digest, match it.
const (
	FilePending FileStatus = "pending" // a resumable upload under way
	FileStored  FileStatus = "stored"
)

// DataFile is an immutable object in object storage, identified by its SHA-256, with
// what it is and where it came from. Identical bytes are stored once; each upload of
// them to another acquisition or project is its own record of the same object.
type DataFile struct {
	ID            string     `json:"id"`
	ProjectID     string     `json:"project_id"`
	AcquisitionID *string    `json:"acquisition_id"`
	SHA256        string     `json:"sha256"` // lower-case hex; empty while pending
	SizeBytes     int64      `json:"size_bytes"`
	MediaType     string     `json:"media_type"`
	FileName      string     `json:"file_name"`
	Store         string     `json:"store"`
	ObjectKey     string     `json:"object_key"`
	Status        FileStatus `json:"status"`
	UploadedBy    string     `json:"uploaded_by"`
	CreatedAt     time.Time  `json:"created_at"`
	StoredAt      *time.Time `json:"stored_at"`
}

// ObjectKey is the content address of bytes with the given SHA-256 (hex): a fan-out
// directory keeps any one directory of a disk store small.
func ObjectKey(sha256Hex string) string {
	return "sha256/" + sha256Hex[:2] + "/" + sha256Hex
}

// NewDataFile is a file whose bytes are stored and verified, ready to record.
type NewDataFile struct {
	ProjectID     string
	AcquisitionID string // empty for a file produced by processing
	SHA256        string
	SizeBytes     int64
	MediaType     string
	FileName      string
	Store         string
	UploadedBy    string
}

// FileTarget names what an upload belongs to: an acquisition (raw data) or only a
// project (a processed file, produced by a derivation).
type FileTarget struct {
	AcquisitionID string
	ProjectID     string
	FileName      string
	MediaType     string
}

var sha256Hex = regexp.MustCompile(`^[0-9a-f]{64}$`)

// Normalize checks the target: exactly one of acquisition and project, a file name
// without directories or control characters, and a media type that parses.
func (t *FileTarget) Normalize() error {
	fe := beamledger.FieldErrors{}
	switch {
	case t.AcquisitionID != "" && t.ProjectID != "":
		fe.Add("project_id", "give acquisition_id for recorded data or project_id for processed files, not both")
	case t.AcquisitionID != "" && !accounts.ValidID(t.AcquisitionID):
		fe.Add("acquisition_id", "must be an acquisition id")
	case t.ProjectID != "" && !accounts.ValidID(t.ProjectID):
		fe.Add("project_id", "must be a project id")
	case t.AcquisitionID == "" && t.ProjectID == "":
		fe.Add("acquisition_id", "is required (or project_id for a processed file)")
	}
	t.FileName = strings.TrimSpace(t.FileName)
	if t.FileName == "" || utf8.RuneCountInString(t.FileName) > 255 || !utf8.ValidString(t.FileName) ||
		strings.ContainsAny(t.FileName, "/\\\x00") || strings.IndexFunc(t.FileName, isControl) >= 0 || path.Clean(t.FileName) != t.FileName || t.FileName == ".." {
		fe.Add("name", "is required: the original file name, without directories or control characters (at most 255 characters)")
	}
	if t.MediaType == "" {
		t.MediaType = "application/octet-stream"
	}
	mt, params, err := mime.ParseMediaType(t.MediaType)
	if err != nil || len(t.MediaType) > 200 {
		fe.Add("Content-Type", "must be a media type such as image/tiff or application/octet-stream")
	} else {
		t.MediaType = mime.FormatMediaType(mt, params)
	}
	return fe.Err()
}

func isControl(r rune) bool { return r < 0x20 || r == 0x7f }

// ParseReprDigest reads the sha-256 value of an RFC 9530 Repr-Digest (or
// Content-Digest) field, "sha-256=:<base64>:", possibly among other algorithms,
// and returns it as hex. ok is false when the field names no sha-256 digest;
// err is set when it does but the value is malformed.
func ParseReprDigest(field string) (hexDigest string, ok bool, err error) {
	for _, member := range strings.Split(field, ",") {
		name, value, found := strings.Cut(strings.TrimSpace(member), "=")
		if !found || !strings.EqualFold(strings.TrimSpace(name), "sha-256") {
			continue
		}
		value = strings.TrimSpace(value)
		if len(value) < 2 || value[0] != ':' || value[len(value)-1] != ':' {
			return "", true, errors.New("sha-256 must be a byte sequence, :<base64>:")
		}
		raw, err := base64.StdEncoding.DecodeString(value[1 : len(value)-1])
		if err != nil || len(raw) != 32 {
			return "", true, errors.New("sha-256 must be 32 bytes in base64")
		}
		return hex.EncodeToString(raw), true, nil
	}
	return "", false, nil
}

// ReprDigest writes a hex SHA-256 as an RFC 9530 Repr-Digest field value.
func ReprDigest(hexDigest string) string {
	raw, _ := hex.DecodeString(hexDigest)
	return "sha-256=:" + base64.StdEncoding.EncodeToString(raw) + ":"
}

// ValidSHA256 reports whether s is a lower-case hex SHA-256.
func ValidSHA256(s string) bool { return sha256Hex.MatchString(s) }

// FileFilter selects data files; empty fields select everything.
type FileFilter struct {
	AcquisitionID string
	ProjectID     string
	SHA256        string
	// ProjectIDs limits the listing to these projects when not nil (a researcher's own).
	ProjectIDs []string
	Limit      int
}

// FileStore persists data-file records.
type FileStore interface {
	// RecordFile records a stored, verified file. The same bytes recorded again for
	// the same acquisition (or project) return the existing record with created
	// false, so a retried upload is harmless. ErrNotFound when the acquisition does
	// not exist.
	RecordFile(ctx context.Context, n NewDataFile, now time.Time) (f DataFile, created bool, err error)
	// DataFile returns one record. ErrNotFound when none.
	DataFile(ctx context.Context, id string) (DataFile, error)
	// DataFiles lists records, newest first.
	DataFiles(ctx context.Context, f FileFilter) ([]DataFile, error)
	// ObjectStored reports whether some stored record already holds these bytes.
	ObjectStored(ctx context.Context, sha256Hex string) (bool, error)
}
