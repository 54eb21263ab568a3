package objects

import (
	"context"
	"errors"
	"net"
	"net/http"

	"github.com/minio/minio-go/v7"

	"beamledger"
)

// unavailableMessage is what a caller is told when the store is down.
const unavailableMessage = "the object store could not be reached; try again later"

// changedMessage is what a caller is told when bytes changed on their way to the store.
const changedMessage = "the object store received bytes that differ from those sent and kept none of them; try again"

// mapS3Error turns minio-go errors into domain errors, by S3 error code and
// HTTP status, never by message text. what names the thing for a not-found
// message ("object sha256/ab/…", "upload …"). Errors it does not know pass
// through unchanged, to be logged and answered with a generic 500.
func mapS3Error(err error, what string) error {
	if err == nil {
		return nil
	}
	var domain *beamledger.Error
	if errors.As(err, &domain) {
		// Ours, from the reader (a short input): already worded. minio-go
		// and net/http hand reader errors back wrapped.
		return err
	}
	if errors.Is(err, context.Canceled) {
		// The caller gave up; that is no fault of the store.
		return err
	}
	resp := minio.ToErrorResponse(err)
	switch resp.Code {
	case "NoSuchKey", "NoSuchVersion":
		return beamledger.NotFound(what)
	case "NoSuchUpload":
		return beamledger.NotFound("upload")
	case "NoSuchBucket":
		// A missing bucket is the store's configuration, not the
		// caller's object: a 500, not a 404.
		return err
	}
	if resp.Code == "BadDigest" {
		// The server received other bytes than were sent (their CRC32C does
		// not match), and kept none of them: the way there, not the caller,
		// is at fault.
		return &s3Error{beamledger.Unavailable(changedMessage), err}
	}
	if reason, ok := invalidCodes[resp.Code]; ok {
		return &s3Error{beamledger.InvalidField(reason[0], reason[1]), err}
	}
	if resp.StatusCode == http.StatusNotFound {
		return beamledger.NotFound(what)
	}
	if isUnavailable(err) {
		return &s3Error{beamledger.Unavailable(unavailableMessage), err}
	}
	return err
}

// mapWriteError is mapS3Error for a request that sent a payload: a signature
// the server does not match then most likely means the payload changed on the
// way (with S3Config.SignPayload its chunks are signed), answered as BadDigest
// is. Wrong credentials fail the signature too, but they fail NewS3's first
// request already; the S3 error stays wrapped for the log either way.
func mapWriteError(err error, what string) error {
	if minio.ToErrorResponse(err).Code == "SignatureDoesNotMatch" {
		return &s3Error{beamledger.Unavailable(changedMessage), err}
	}
	return mapS3Error(err, what)
}

// invalidCodes words the S3 errors that blame the request, as a field and a
// reason, in the same words Disk uses.
var invalidCodes = map[string][2]string{
	"InvalidPart":      {"parts", "a part was not uploaded or its ETag does not match"},
	"InvalidPartOrder": {"parts", "not in increasing order of number"},
	"EntityTooSmall":   {"parts", "a part other than the last is smaller than the least part size"},
	"InvalidRange":     {"offset", "is past the end of the object"},
}

// isUnavailable reports whether err says the server is down, overloaded or
// too slow rather than refusing the request: a 5xx status, a deadline, or a
// transport error (connection refused or reset, DNS, TLS, timeouts — the
// standard library reports them all as net.Error).
func isUnavailable(err error) bool {
	if err == nil {
		return false
	}
	if minio.ToErrorResponse(err).StatusCode >= http.StatusInternalServerError {
		return true
	}
	if errors.Is(err, context.DeadlineExceeded) {
		return true
	}
	var netErr net.Error
	return errors.As(err, &netErr)
}

// s3Error is a domain error that keeps minio-go's error for the logs; the
// caller sees only the domain error's message.
type s3Error struct {
	domain *beamledger.Error
	cause  error
}

func (e *s3Error) Error() string   { return e.domain.Message + ": " + e.cause.Error() }
func (e *s3Error) Unwrap() []error { return []error{e.domain, e.cause} }
