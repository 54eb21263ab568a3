package server

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/google/uuid"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
)

// upload sends raw bytes to path (recording the exchange like w.do), with extra
// request headers, decoding a 2xx answer into out.
func (w *world) upload(path, token string, body []byte, header http.Header, out any) response {
	w.t.Helper()
	req, err := http.NewRequest(http.MethodPost, w.http.URL+path, bytes.NewReader(body))
	if err != nil {
		w.t.Fatal(err)
	}
	req.Header.Set("Content-Type", "application/octet-stream")
	for k, v := range header {
		req.Header[k] = v
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	return w.send(req, out)
}

// get fetches path with extra request headers, recording the exchange.
func (w *world) get(path, token string, header http.Header) response {
	w.t.Helper()
	req, err := http.NewRequest(http.MethodGet, w.http.URL+path, nil)
	if err != nil {
		w.t.Fatal(err)
	}
	for k, v := range header {
		req.Header[k] = v
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	return w.send(req, nil)
}

func (w *world) send(req *http.Request, out any) response {
	w.t.Helper()
	res, err := w.http.Client().Do(req)
	if err != nil {
		w.t.Fatal(err)
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	if err != nil {
		w.t.Fatal(err)
	}
	recordExchange(req.Method, req.URL.RequestURI(), req, res, b)
	if out != nil && res.StatusCode/100 == 2 {
		if err := json.Unmarshal(b, out); err != nil {
			w.t.Fatalf("%s %s: decode %q: %v", req.Method, req.URL, b, err)
		}
	}
	return response{StatusCode: res.StatusCode, Header: res.Header, Body: b}
}

// reprDigest is the RFC 9530 field for b.
func reprDigest(b []byte) string {
	sum := sha256.Sum256(b)
	return "sha-256=:" + base64.StdEncoding.EncodeToString(sum[:]) + ":"
}

// testAcquisition records an acquisition of the researcher on a past booking and
// returns its id.
func testAcquisition(w *world) string {
	w.t.Helper()
	// An instrument of its own, so that the booking overlaps nothing another test made.
	in, err := w.db.CreateInstrument(context.Background(), scheduling.Instrument{Code: "ACQ-" + strings.ToUpper(uuid.NewString()[:8]),
		Name: "Files STEM", Kind: scheduling.KindSTEM, Bookable: true, Corrector: scheduling.CorrectorNone, AcceleratingVoltagesV: []float64{300e3}}, "setup", time.Now())
	if err != nil {
		w.t.Fatal(err)
	}
	booking, start := w.pastBooking(in.ID, w.own.ID, w.users[accounts.RoleResearcher].ID)
	var a provenance.Acquisition
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/acquisitions", w.tokens[accounts.RoleResearcher], map[string]any{
		"booking_id": booking, "started_at": start.Add(time.Hour), "ended_at": start.Add(2 * time.Hour),
		"conditions": map[string]any{"accelerating_voltage": "300 kV"}}, &a)
	return a.ID
}

func TestFileUploadAndDownload(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	// [published: FIPS 180-4 examples] SHA-256("abc").
	const abc = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
	var f provenance.DataFile
	r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=abc.txt", researcher, []byte("abc"), http.Header{"Content-Type": {"text/plain"}}, &f)
	if r.StatusCode != http.StatusCreated || f.SHA256 != abc || f.SizeBytes != 3 || f.Status != provenance.FileStored ||
		f.MediaType != "text/plain" || f.FileName != "abc.txt" || *f.AcquisitionID != acq || f.ProjectID != w.own.ID {
		t.Fatalf("upload: %d %+v", r.StatusCode, f)
	}
	if r.Header.Get("Repr-Digest") != "sha-256=:ungWv48Bz+pBQUDeXa4iI7ADYaOWF3qctBD/YfIAFa0=:" { // [published: FIPS 180-4] "abc" in base64
		t.Errorf("Repr-Digest %q", r.Header.Get("Repr-Digest"))
	}

	// The same bytes again, with the digest declared: the same record, 200.
	var again provenance.DataFile
	r = w.upload("/api/v1/files?acquisition_id="+acq+"&name=abc-copy.txt", researcher, []byte("abc"), http.Header{"Repr-Digest": {reprDigest([]byte("abc"))}}, &again)
	if r.StatusCode != http.StatusOK || again.ID != f.ID {
		t.Errorf("second upload of the same bytes: %d %+v", r.StatusCode, again)
	}

	// A declared digest that does not match leaves no record and no object.
	other := []byte("abd")
	r = w.upload("/api/v1/files?acquisition_id="+acq+"&name=x.bin", researcher, other, http.Header{"Repr-Digest": {reprDigest([]byte("abc"))}}, nil)
	if r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Repr-Digest") {
		t.Errorf("mismatched digest: %d %s", r.StatusCode, r.Body)
	}
	r = w.upload("/api/v1/files?acquisition_id="+acq+"&name=x.bin", researcher, other, http.Header{"Repr-Digest": {"sha-256=:" + base64.StdEncoding.EncodeToString(make([]byte, 32)) + ":"}}, nil)
	if r.StatusCode != http.StatusBadRequest {
		t.Errorf("mismatched digest of new bytes: %d %s", r.StatusCode, r.Body)
	}
	sumOther := sha256.Sum256(other)
	var list struct{ Items []provenance.DataFile }
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files?sha256="+hex.EncodeToString(sumOther[:]), researcher, nil, &list)
	if len(list.Items) != 0 {
		t.Errorf("a refused upload left a record: %+v", list.Items)
	}
	var leftovers []string
	if err := w.srv.objects.List(t.Context(), "", func(i objects.Info) error { leftovers = append(leftovers, i.Key); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(leftovers) != 1 || leftovers[0] != provenance.ObjectKey(abc) {
		t.Errorf("objects in the store = %v; want only the abc object", leftovers)
	}

	// Download: whole with ETag and Repr-Digest, a range, a suffix range, 304, 416.
	content := "/api/v1/files/" + f.ID + "/content"
	r = w.get(content, researcher, nil)
	if r.StatusCode != http.StatusOK || string(r.Body) != "abc" || r.Header.Get("ETag") != `"`+abc+`"` || r.Header.Get("Repr-Digest") == "" {
		t.Errorf("download: %d %q %v", r.StatusCode, r.Body, r.Header)
	}
	r = w.get(content, researcher, http.Header{"Range": {"bytes=1-"}})
	if r.StatusCode != http.StatusPartialContent || string(r.Body) != "bc" || r.Header.Get("Content-Range") != "bytes 1-2/3" {
		t.Errorf("range 1-: %d %q %q", r.StatusCode, r.Body, r.Header.Get("Content-Range"))
	}
	r = w.get(content, researcher, http.Header{"Range": {"bytes=-1"}})
	if r.StatusCode != http.StatusPartialContent || string(r.Body) != "c" {
		t.Errorf("suffix range: %d %q", r.StatusCode, r.Body)
	}
	if r = w.get(content, researcher, http.Header{"If-None-Match": {`"` + abc + `"`}}); r.StatusCode != http.StatusNotModified {
		t.Errorf("If-None-Match: %d", r.StatusCode)
	}
	if r = w.get(content, researcher, http.Header{"Range": {"bytes=5-9"}}); r.StatusCode != http.StatusRequestedRangeNotSatisfiable || r.Header.Get("Content-Range") != "bytes */3" {
		t.Errorf("range past the end: %d %v", r.StatusCode, r.Header)
	}
	// Another project's member sees nothing of it.
	other2 := w.login(w.other.Email, testPassword).AccessToken
	if r = w.get(content, other2, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("foreign download: %d", r.StatusCode)
	}
	if r = w.upload("/api/v1/files?acquisition_id="+acq+"&name=y.bin", other2, []byte("xyz"), nil, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("foreign upload: %d %s", r.StatusCode, r.Body)
	}
	// Bad names and targets are refused before any byte is read.
	for _, q := range []string{"acquisition_id=" + acq + "&name=../etc/passwd", "acquisition_id=" + acq, "name=a.bin", "acquisition_id=" + acq + "&project_id=" + w.own.ID + "&name=a"} {
		if r = w.upload("/api/v1/files?"+q, researcher, []byte("abc"), nil, nil); r.StatusCode != http.StatusBadRequest {
			t.Errorf("upload ?%s: %d %s", q, r.StatusCode, r.Body)
		}
	}
}

// TestFileLargeStreaming uploads 40 MiB without a declared digest (through the
// temporary key and the promotion) and reads it back whole and by range.
func TestFileLargeStreaming(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	data := make([]byte, 40<<20)
	for i := range data {
		data[i] = byte(i*7 + i>>13)
	}
	sum := sha256.Sum256(data)
	var f provenance.DataFile
	if r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=scan.raw", researcher, data, nil, &f); r.StatusCode != http.StatusCreated {
		t.Fatalf("upload: %d %s", r.StatusCode, r.Body)
	}
	if f.SHA256 != hex.EncodeToString(sum[:]) || f.SizeBytes != int64(len(data)) {
		t.Errorf("record %+v", f)
	}
	r := w.get("/api/v1/files/"+f.ID+"/content", researcher, http.Header{"Range": {"bytes=33554432-33554441"}})
	if r.StatusCode != http.StatusPartialContent || !bytes.Equal(r.Body, data[32<<20:32<<20+10]) {
		t.Errorf("range in the middle: %d %x", r.StatusCode, r.Body)
	}
}

func TestDerivationsAndLineage(t *testing.T) {
	w := newWorld(t)
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	put := func(q string, body string) provenance.DataFile {
		t.Helper()
		var f provenance.DataFile
		if r := w.upload("/api/v1/files?"+q, researcher, []byte(body), nil, &f); r.StatusCode != http.StatusCreated {
			t.Fatalf("upload %s: %d %s", q, r.StatusCode, r.Body)
		}
		return f
	}
	raw := put("acquisition_id="+acq+"&name=raw.h5", "raw frames")
	aligned := put("project_id="+w.own.ID+"&name=aligned.tif", "aligned stack")
	figure := put("project_id="+w.own.ID+"&name=fig2b.png", "figure panel")
	step := func(out provenance.DataFile, ins ...provenance.DataFile) response {
		ids := []string{}
		for _, in := range ins {
			ids = append(ids, in.ID)
		}
		return w.do(http.MethodPost, "/api/v1/derivations", researcher, map[string]any{"output_file_id": out.ID, "input_file_ids": ids,
			"software": "drift-align", "software_version": "2.3.1", "parameters": map[string]any{"upsample": 4}, "performed_at": w.clock.Now()}, nil)
	}
	if r := step(aligned, raw); r.StatusCode != http.StatusCreated {
		t.Fatalf("derivation: %d %s", r.StatusCode, r.Body)
	}
	if r := step(figure, aligned); r.StatusCode != http.StatusCreated {
		t.Fatalf("derivation: %d %s", r.StatusCode, r.Body)
	}
	// raw ← aligned ← figure: deriving raw from the figure closes a cycle.
	if r := step(raw, figure); r.StatusCode != http.StatusUnprocessableEntity || !contains(r.Body, `"rule":"lineage_cycle"`) {
		t.Errorf("cycle: %d %s", r.StatusCode, r.Body)
	}
	if r := step(figure, raw); r.StatusCode != http.StatusConflict {
		t.Errorf("second producer of one file: %d %s", r.StatusCode, r.Body)
	}
	var l provenance.Lineage
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+figure.ID+"/lineage", w.tokens[accounts.RoleAuditor], nil, &l)
	if got := l.Ancestors(figure.ID); len(got) != 2 || got[0] != aligned.ID || got[1] != raw.ID || len(l.Files) != 3 || len(l.Derivations) != 2 {
		t.Errorf("lineage of the figure: ancestors %v, %d files, %d derivations", got, len(l.Files), len(l.Derivations))
	}
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+raw.ID+"/lineage", researcher, nil, &l)
	if len(l.Derivations) != 2 || len(l.Ancestors(raw.ID)) != 0 {
		t.Errorf("lineage of the raw file (downstream): %+v", l.Derivations)
	}
	other := w.login(w.other.Email, testPassword).AccessToken
	if r := w.do(http.MethodGet, "/api/v1/files/"+raw.ID+"/lineage", other, nil, nil); r.StatusCode != http.StatusNotFound {
		t.Errorf("foreign lineage: %d", r.StatusCode)
	}
}

// exerciseFiles calls every data-file route with success and with an error, for
// TestOpenAPIExamplesExercise.
func exerciseFiles(t *testing.T, w *world) {
	researcher, auditor := w.tokens[accounts.RoleResearcher], w.tokens[accounts.RoleAuditor]
	acq := testAcquisition(w)
	var raw, out provenance.DataFile
	w.upload("/api/v1/files?acquisition_id="+acq+"&name=raw.bin", researcher, []byte("exercise raw"), http.Header{"Repr-Digest": {reprDigest([]byte("exercise raw"))}}, &raw)
	if r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=raw.bin", researcher, []byte("exercise raw"), nil, nil); r.StatusCode != http.StatusOK {
		t.Errorf("repeat upload: %d", r.StatusCode)
	}
	w.upload("/api/v1/files?acquisition_id="+acq+"&name=bad.bin", researcher, []byte("x"), http.Header{"Repr-Digest": {"sha-256=:nope:"}}, nil)
	w.upload("/api/v1/files?project_id="+w.own.ID+"&name=out.bin", researcher, []byte("exercise out"), nil, &out)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files?acquisition_id="+acq, researcher, nil, nil)
	w.expect(http.StatusBadRequest, http.MethodGet, "/api/v1/files?sha256=xyz", researcher, nil, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+raw.ID, auditor, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/files/"+acq, auditor, nil, nil)
	content := "/api/v1/files/" + raw.ID + "/content"
	for _, c := range []struct {
		h    http.Header
		want int
	}{{nil, 200}, {http.Header{"Range": {"bytes=0-3"}}, 206}, {http.Header{"If-None-Match": {`"` + raw.SHA256 + `"`}}, 304}, {http.Header{"Range": {"bytes=99-"}}, 416}} {
		if r := w.get(content, auditor, c.h); r.StatusCode != c.want {
			t.Errorf("content %v: %d, want %d", c.h, r.StatusCode, c.want)
		}
	}
	w.expect(http.StatusCreated, http.MethodPost, "/api/v1/derivations", researcher, map[string]any{"output_file_id": out.ID, "input_file_ids": []string{raw.ID},
		"software": "exporter", "software_version": "1.0", "performed_at": w.clock.Now()}, nil)
	w.expect(http.StatusUnprocessableEntity, http.MethodPost, "/api/v1/derivations", researcher, map[string]any{"output_file_id": raw.ID, "input_file_ids": []string{out.ID},
		"software": "exporter", "software_version": "1.0", "performed_at": w.clock.Now()}, nil)
	w.expect(http.StatusBadRequest, http.MethodPost, "/api/v1/derivations", researcher, map[string]any{"output_file_id": out.ID, "input_file_ids": []string{}}, nil)
	w.expect(http.StatusOK, http.MethodGet, "/api/v1/files/"+out.ID+"/lineage", researcher, nil, nil)
	w.expect(http.StatusNotFound, http.MethodGet, "/api/v1/files/"+acq+"/lineage", researcher, nil, nil)
}

// TestDeclaredDigestMismatchS3: on S3, where the store reads exactly Content-Length
// bytes, bytes that do not match the declared digest still never become an object,
// whether they go up in one request or in parts.
func TestDeclaredDigestMismatchS3(t *testing.T) {
	w := newWorld(t)
	s3 := objectstest.NewS3(t)
	w.srv.objects = s3
	researcher := w.tokens[accounts.RoleResearcher]
	acq := testAcquisition(w)
	for _, size := range []int{3, 9 << 20, 21 << 20} {
		body := bytes.Repeat([]byte("x"), size)
		wrong := reprDigest(append(bytes.Clone(body), 'y'))
		r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=x.bin", researcher, body, http.Header{"Repr-Digest": {wrong}}, nil)
		if r.StatusCode != http.StatusBadRequest || !fieldNamed(r, "Repr-Digest") {
			t.Errorf("%d bytes, wrong digest: %d %s", size, r.StatusCode, r.Body)
		}
	}
	var keys []string
	if err := s3.List(context.Background(), "", func(i objects.Info) error { keys = append(keys, i.Key); return nil }); err != nil || len(keys) != 0 {
		t.Errorf("objects left by refused uploads: %v %v", keys, err)
	}
	// The right digest on the same path stores the file.
	body := bytes.Repeat([]byte("x"), 21<<20)
	if r := w.upload("/api/v1/files?acquisition_id="+acq+"&name=x.bin", researcher, body, http.Header{"Repr-Digest": {reprDigest(body)}}, nil); r.StatusCode != http.StatusCreated {
		t.Errorf("right digest: %d %s", r.StatusCode, r.Body)
	}
}
