package provenance

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"time"
)

// ScrubOutcome is what reading a stored object back found.
type ScrubOutcome string

// Scrub outcomes. Every one but ScrubOK is a finding.
const (
	ScrubOK             ScrubOutcome = "ok"
	ScrubMissing        ScrubOutcome = "missing"         // a record's object is not in the store
	ScrubSizeMismatch   ScrubOutcome = "size_mismatch"   // the object has another length than recorded
	ScrubDigestMismatch ScrubOutcome = "digest_mismatch" // the object's bytes hash to another SHA-256
	ScrubUnreadable     ScrubOutcome = "unreadable"      // the store failed while the object was read
	ScrubUnrecorded     ScrubOutcome = "unrecorded"      // an object under a content address no record names
)

// StoredObject is one object that records point to.
type StoredObject struct {
	SHA256    string
	Key       string
	SizeBytes int64
}

// ScrubFinding is one problem found.
type ScrubFinding struct {
	Outcome ScrubOutcome `json:"outcome"`
	Key     string       `json:"key"`
	SHA256  string       `json:"sha256,omitempty"`
	Detail  string       `json:"detail"`
}

// ScrubReport sums up a scrub.
type ScrubReport struct {
	Checked   int            `json:"checked"`
	Bytes     int64          `json:"bytes"`
	Listed    int            `json:"listed"`
	Findings  []ScrubFinding `json:"findings"`
	StartedAt time.Time      `json:"started_at"`
	Elapsed   time.Duration  `json:"elapsed_ns"`
}

// CheckObject reads r to its end and compares what it holds with the record. It
// returns the bytes read and the outcome: ScrubOK, a size or digest mismatch, or
// ScrubUnreadable with the read error as detail. buf is the copy buffer (a large one
// keeps the hashing at memory speed).
func CheckObject(o StoredObject, r io.Reader, buf []byte) (int64, ScrubOutcome, string) {
	h := sha256.New()
	n, err := io.CopyBuffer(h, r, buf)
	switch {
	case err != nil:
		return n, ScrubUnreadable, err.Error()
	case n != o.SizeBytes:
		return n, ScrubSizeMismatch, fmt.Sprintf("%d bytes stored, %d recorded", n, o.SizeBytes)
	}
	if got := hex.EncodeToString(h.Sum(nil)); got != o.SHA256 {
		return n, ScrubDigestMismatch, "the bytes hash to " + got
	}
	return n, ScrubOK, ""
}
