package objects

import (
	"errors"
	"fmt"
	"io"
	"strings"

	"beamledger"
)

const (
	// maxKeyLen is S3's limit on a key, in bytes.
	maxKeyLen = 1024
	// maxSegmentLen is NAME_MAX on Linux file systems: the disk store (and an
	// S3 server with a POSIX back end) keeps each segment as one file name.
	maxSegmentLen = 255
)

// checkKey refuses keys outside the plain set the package documents. Both stores
// apply the same rule, so a key that works on disk in development also works on
// S3 in production and the other way round.
func checkKey(field, key string) error {
	if key == "" {
		return beamledger.InvalidField(field, "is empty")
	}
	if len(key) > maxKeyLen {
		return beamledger.InvalidField(field, fmt.Sprintf("is longer than %d bytes", maxKeyLen))
	}
	if reason := badChar(key); reason != "" {
		return beamledger.InvalidField(field, reason)
	}
	for seg := range strings.SplitSeq(key, "/") {
		switch {
		case seg == "":
			return beamledger.InvalidField(field, "has an empty segment (a leading, trailing or doubled '/')")
		case seg[0] == '.':
			// Rules out "." and ".." and keeps dot-names free for the disk
			// store's own folders.
			return beamledger.InvalidField(field, "has a segment starting with '.'")
		case len(seg) > maxSegmentLen:
			return beamledger.InvalidField(field, fmt.Sprintf("has a segment longer than %d bytes", maxSegmentLen))
		}
	}
	return nil
}

// checkPrefix accepts what a key may start with: the empty string, a whole key,
// a key followed by '/', or a key cut anywhere.
func checkPrefix(prefix string) error {
	if prefix == "" {
		return nil
	}
	if len(prefix) > maxKeyLen {
		return beamledger.InvalidField("prefix", fmt.Sprintf("is longer than %d bytes", maxKeyLen))
	}
	if reason := badChar(prefix); reason != "" {
		return beamledger.InvalidField("prefix", reason)
	}
	segs := strings.Split(prefix, "/")
	for i, seg := range segs {
		last := i == len(segs)-1
		if (seg == "" && !last) || (seg != "" && seg[0] == '.') {
			return beamledger.InvalidField("prefix", "cannot start any key")
		}
	}
	return nil
}

// badChar says what is wrong with the characters of s, or "" when nothing is.
func badChar(s string) string {
	for _, c := range []byte(s) {
		switch {
		case 'a' <= c && c <= 'z', 'A' <= c && c <= 'Z', '0' <= c && c <= '9':
		case c == '/', c == '-', c == '_', c == '.':
		default:
			return fmt.Sprintf("may hold only ASCII letters, digits, '/', '-', '_' and '.' (found %q)", rune(c))
		}
	}
	return ""
}

// checkRange refuses offsets and lengths that describe no range at all; a
// range past the end is the stores' to judge.
func checkRange(offset, length int64) error {
	if offset < 0 {
		return beamledger.InvalidField("offset", "is negative")
	}
	if length < -1 {
		return beamledger.InvalidField("length", "is negative (use -1 for \"to the end\")")
	}
	return nil
}

// errShortInput is wrapped by the error a Put or PutPart returns when its
// reader ends before the size it was given.
var errShortInput = errors.New("input ended early")

// sizedReader passes exactly size bytes through and fails, instead of ending
// quietly, when the source runs out first. Without it a truncated upload (a
// client that hangs up half-way) could be stored as a shorter object: minio-go
// treats io.ErrUnexpectedEOF from the source as the end of the last part.
type sizedReader struct {
	r    io.Reader
	left int64
	size int64
}

func newSizedReader(r io.Reader, size int64) *sizedReader {
	return &sizedReader{r: io.LimitReader(r, size), left: size, size: size}
}

func (s *sizedReader) Read(p []byte) (int, error) {
	n, err := s.r.Read(p)
	s.left -= int64(n)
	if err == io.EOF && s.left > 0 {
		return n, shortInputError(s.size, s.size-s.left)
	}
	return n, err
}

// shortInputError is an Invalid error (the caller promised bytes it did not
// send) that also matches errShortInput.
func shortInputError(want, got int64) error {
	return fmt.Errorf("%w (%w)", beamledger.Invalid(
		fmt.Sprintf("the data ended after %d of the %d bytes announced", got, want),
		map[string]string{"size": "is more than the data sent"}), errShortInput)
}

// readerFunc adapts a function to io.Reader.
type readerFunc func([]byte) (int, error)

func (f readerFunc) Read(p []byte) (int, error) { return f(p) }
