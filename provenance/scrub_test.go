package provenance

import (
	"bytes"
	"errors"
	"io"
	"strings"
	"testing"
)

func TestCheckObject(t *testing.T) {
	// [published: FIPS 180-4 examples] SHA-256 of "abc" and of the 448-bit message.
	abc := StoredObject{SHA256: "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", SizeBytes: 3}
	long := StoredObject{SHA256: "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1", SizeBytes: 56}
	buf := make([]byte, 7) // smaller than the input, so the copy loops
	for _, c := range []struct {
		o    StoredObject
		r    io.Reader
		want ScrubOutcome
	}{
		{abc, strings.NewReader("abc"), ScrubOK},
		{long, strings.NewReader("abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"), ScrubOK},
		{abc, strings.NewReader("abd"), ScrubDigestMismatch}, // one byte changed
		{abc, strings.NewReader("abcd"), ScrubSizeMismatch},
		{abc, io.MultiReader(strings.NewReader("ab"), errReader{}), ScrubUnreadable},
	} {
		n, got, detail := CheckObject(c.o, c.r, buf)
		if got != c.want || (got != ScrubOK) == (detail == "") {
			t.Errorf("CheckObject(%s…) = %d %s %q, want %s", c.o.SHA256[:8], n, got, detail, c.want)
		}
	}
	// [published: FIPS 180-4 examples] one million "a".
	million := StoredObject{SHA256: "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0", SizeBytes: 1e6}
	if n, got, _ := CheckObject(million, bytes.NewReader(bytes.Repeat([]byte("a"), 1e6)), make([]byte, 1<<16)); got != ScrubOK || n != 1e6 {
		t.Errorf("one million a: %d %s", n, got)
	}
}

type errReader struct{}

func (errReader) Read([]byte) (int, error) { return 0, errors.New("connection reset") }
