package server

import (
	"net/http"
	"testing"

	"beamledger/accounts"
	"beamledger/provenance"
)

// TestTraceByLargeBytes: a file larger than the JSON body limit is traced by its
// bytes, hashed as they stream, like any other.
func TestTraceByLargeBytes(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	data := make([]byte, 3*w.srv.cfg.MaxBodyBytes+17)
	for i := range data {
		data[i] = byte(i * 7)
	}
	var f provenance.DataFile
	if r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=big.raw", researcher, data, nil, &f); r.StatusCode != http.StatusCreated {
		t.Fatalf("upload: %d %s", r.StatusCode, r.Body)
	}
	var tr struct {
		File provenance.DataFile `json:"file"`
	}
	if r := w.upload("/api/v1/trace", researcher, data, nil, &tr); r.StatusCode != http.StatusOK || tr.File.ID != f.ID {
		t.Fatalf("trace by %d bytes: %d %s", len(data), r.StatusCode, r.Body)
	}
}
