package bundle_test

import (
	"bytes"
	"testing"

	"beamledger/provenance/bundle"
)

// FuzzVerify feeds the offline verifier bundles as an auditor may receive them,
// from anyone: the fuzzer mutates a valid bundle (with and without its data file).
// Whatever the bytes, Verify answers without panicking and within bounded memory
// (members are read with a cap), and a bundle it accepts names the fixture's file
// and digest: any change that matters to what a bundle proves is refused.
func FuzzVerify(f *testing.F) {
	tr, data := fixture(f)
	with, without := write(f, tr, data), write(f, tr, nil)
	f.Add(with)
	f.Add(without)
	f.Add([]byte("PK\x05\x06" + string(make([]byte, 18))))
	f.Add([]byte{})
	key := signer(f, rfc8032Seed).Verifier()
	f.Fuzz(func(t *testing.T, b []byte) {
		s, err := bundle.Verify(bytes.NewReader(b), int64(len(b)), key)
		if err != nil {
			return
		}
		if s.SHA256 != tr.File.SHA256 || s.FileID != tr.File.ID || s.TreeSize != 4 {
			t.Fatalf("accepted a bundle stating %+v", s)
		}
	})
}
