package browsertest

import (
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"beamledger/accounts"
)

// TestTraceAndBundle seals the ledger, then traces a demo data file as the auditor:
// first by typing its SHA-256, then by dropping the file itself; every inclusion
// proof is checked in the browser against the signed checkpoint, and the
// provenance bundle downloads.
func TestTraceAndBundle(t *testing.T) {
	s := newSite(t)
	if code := s.api(t, accounts.RoleManager, http.MethodPost, "/api/v1/ledger/checkpoints", nil, nil); code != http.StatusCreated {
		t.Fatalf("sign a checkpoint: %d", code)
	}
	var files struct {
		Items []struct {
			ID       string `json:"id"`
			SHA256   string `json:"sha256"`
			FileName string `json:"file_name"`
		} `json:"items"`
	}
	s.api(t, accounts.RoleAuditor, http.MethodGet, "/api/v1/files", nil, &files)
	var id, digest, name string
	for _, f := range files.Items {
		if strings.Contains(f.FileName, "virtual_adf") { // derived from the 4D scan
			id, digest, name = f.ID, f.SHA256, f.FileName
		}
	}
	if digest == "" {
		t.Fatalf("the demo's virtual ADF image is missing: %+v", files.Items)
	}
	ctx := newBrowser(t)
	s.signIn(t, ctx, accounts.RoleAuditor)
	run(t, ctx, "open the trace page", chromedp.Navigate(s.url+"/trace"), chromedp.WaitVisible(css("#trace-form")),
		chromedp.SendKeys(css("#trace-digest"), digest), chromedp.Click(css(`#trace-form button[type="submit"]`)))
	ledger := waitText(t, ctx, "#trace-ledger", "inclusion proofs checked in this browser", 20*time.Second)
	// "N of M ledger events sealed; K of N inclusion proofs checked": all sealed, all valid.
	var events, sealed, valid, of int
	if _, err := fmtSscan(ledger, &sealed, &events, &valid, &of); err != nil || sealed == 0 || sealed != events || valid != sealed || of != sealed {
		t.Fatalf("ledger status %q: sealed %d of %d, valid %d of %d", ledger, sealed, events, valid, of)
	}
	waitText(t, ctx, "#trace-file-facts", name, time.Second)
	waitText(t, ctx, "#trace-derivations", "virtual-detector 0.4.2", time.Second)
	screenshot(t, ctx, "trace")
	status := eval[string](t, ctx, "download the bundle", `fetch(document.querySelector("#trace-bundle").href).then(async r =>
		r.status + " " + r.headers.get("Content-Type") + " " + (await r.arrayBuffer()).byteLength)`)
	parts := strings.Fields(status)
	if len(parts) != 3 || parts[0] != "200" || parts[1] != "application/zip" {
		t.Fatalf("bundle download: %q", status)
	}
	if n, _ := strconv.Atoi(parts[2]); n < 1000 {
		t.Fatalf("bundle of %d bytes", n)
	}

	// The same trace from the file's bytes, hashed in the browser.
	var content []byte
	if code := s.api(t, accounts.RoleAuditor, http.MethodGet, "/api/v1/files/"+id+"/content", nil, &content); code != http.StatusOK {
		t.Fatalf("file content: %d", code)
	}
	path := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(path, content, 0o644); err != nil {
		t.Fatal(err)
	}
	run(t, ctx, "start again", chromedp.Navigate(s.url+"/trace"), chromedp.WaitVisible(css("#trace-form")),
		chromedp.SetUploadFiles(css("#trace-file"), []string{path}))
	waitText(t, ctx, "#trace-file-facts", digest, 20*time.Second)
	if got := eval[string](t, ctx, "read the digest field", `document.querySelector("#trace-digest").value`); got != digest {
		t.Fatalf("the dropped file hashed to %s, want %s", got, digest)
	}
	// A digest nobody recorded is reported beside the form.
	run(t, ctx, "an unknown digest", retype("#trace-digest", strings.Repeat("0", 64)), chromedp.Click(css(`#trace-form button[type="submit"]`)))
	waitText(t, ctx, "#trace-error", "no data file you may read has this SHA-256", 10*time.Second)
}
