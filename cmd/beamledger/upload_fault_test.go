package main

import (
	"bufio"
	"context"
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"errors"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"beamledger"
	"beamledger/provenance"
	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// serveProcess is a real `beamledger serve` process.
type serveProcess struct {
	cmd  *exec.Cmd
	addr string

	mu  sync.Mutex
	log []string // every line it wrote to stderr
}

// logLines returns the lines the process has logged so far.
func (p *serveProcess) logLines() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return slices.Clone(p.log)
}

// startServe runs the binary with env and waits for its "listening" log line.
func startServe(t testing.TB, bin string, env []string) *serveProcess {
	t.Helper()
	cmd := exec.Command(bin, "serve")
	cmd.Env = append(os.Environ(), env...)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &serveProcess{cmd: cmd}
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })
	found := make(chan string, 1)
	ended := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(stderr)
		sc.Buffer(nil, 1<<20)
		for sc.Scan() {
			var line struct{ Msg, Addr string }
			if json.Unmarshal(sc.Bytes(), &line) == nil && line.Msg == "listening" {
				found <- line.Addr
			}
			p.mu.Lock()
			p.log = append(p.log, sc.Text())
			p.mu.Unlock()
		}
		ended <- strings.Join(p.logLines(), "\n")
	}()
	select {
	case p.addr = <-found:
	case out := <-ended:
		t.Fatalf("serve ended before listening:\n%s", out)
	case <-time.After(60 * time.Second):
		t.Fatal("serve did not start listening within 60 s")
	}
	return p
}

// TestUploadSurvivesServerKill kills the server (SIGKILL) in the middle of a
// multipart upload: no file record is stored, the store still holds the parts,
// and the restarted server's cleanup aborts them and removes the pending record.
func TestUploadSurvivesServerKill(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs it against PostgreSQL and S3")
	}
	ctx := context.Background()
	dbURL := pgtest.NewDatabase(t)
	db, err := postgres.Open(ctx, dbURL, 2)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	s3cfg := objectstest.Config(t)
	store, err := objects.NewS3(ctx, s3cfg)
	if err != nil {
		t.Fatal(err)
	}
	bin := buildBinary(t)
	env := serveEnv(dbURL, s3cfg)
	srv := startServe(t, bin, env)
	base := "http://" + srv.addr
	projectID, token := researcherWithProject(t, db, base)

	// A 40 MiB upload; the PATCH sends 20 MiB and then waits, as a slow link would.
	const length = 40 << 20
	meta := "filename " + b64("big.raw") + ",project_id " + b64(projectID)
	req, _ := http.NewRequest(http.MethodPost, base+"/api/v1/uploads", nil)
	req.Header.Set("Tus-Resumable", "1.0.0")
	req.Header.Set("Authorization", "Bearer "+token)
	req.Header.Set("Upload-Length", strconv.Itoa(length))
	req.Header.Set("Upload-Metadata", meta)
	res, err := http.DefaultClient.Do(req)
	if err != nil || res.StatusCode != http.StatusCreated {
		t.Fatalf("create: %v %v", res, err)
	}
	res.Body.Close()
	loc, fileID := base+res.Header.Get("Location"), res.Header.Get("Data-File-Id")
	pr, pw := io.Pipe()
	patch, _ := http.NewRequest(http.MethodPatch, loc, pr)
	patch.ContentLength = length
	for k, v := range map[string]string{"Tus-Resumable": "1.0.0", "Authorization": "Bearer " + token,
		"Content-Type": "application/offset+octet-stream", "Upload-Offset": "0"} {
		patch.Header.Set(k, v)
	}
	go func() {
		if res, err := http.DefaultClient.Do(patch); err == nil {
			res.Body.Close()
		}
	}()
	if _, err := pw.Write(testPattern(20 << 20)); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 30*time.Second, "two parts stored", func() bool {
		h, _ := http.NewRequest(http.MethodHead, loc, nil)
		h.Header.Set("Tus-Resumable", "1.0.0")
		h.Header.Set("Authorization", "Bearer "+token)
		res, err := http.DefaultClient.Do(h)
		if err != nil {
			return false
		}
		res.Body.Close()
		n, _ := strconv.Atoi(res.Header.Get("Upload-Offset"))
		return n >= 16<<20
	})

	if err := srv.cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	_ = srv.cmd.Wait()
	pw.Close()
	if f, err := db.DataFile(ctx, fileID); err != nil || f.Status != provenance.FilePending {
		t.Fatalf("the file after the kill: %+v %v; want it pending", f, err)
	}
	if fs, err := db.DataFiles(ctx, provenance.FileFilter{ProjectID: projectID}); err != nil || len(fs) != 1 || fs[0].Status == provenance.FileStored {
		t.Fatalf("records after the kill: %+v %v", fs, err)
	}
	if ps, err := store.ListMultipart(ctx, "incoming/"); err != nil || len(ps) != 1 {
		t.Fatalf("multipart uploads after the kill: %v %v; want the one cut off", ps, err)
	}

	// Restarted with a short expiry, the cleanup (run at start and then every
	// second) aborts the parts once the dead request's lease has run out.
	again := startServe(t, bin, append(env, "BEAMLEDGER_UPLOAD_EXPIRY=1s"))
	waitFor(t, 90*time.Second, "the cleanup to abort the parts", func() bool {
		ps, err := store.ListMultipart(ctx, "incoming/")
		return err == nil && len(ps) == 0
	})
	if _, err := db.DataFile(ctx, fileID); !errors.Is(err, beamledger.ErrNotFound) {
		t.Errorf("the pending record after the cleanup: %v", err)
	}
	var left []string
	_ = store.List(ctx, "", func(i objects.Info) error { left = append(left, i.Key); return nil })
	if len(left) != 0 {
		t.Errorf("objects left after the cleanup: %v", left)
	}
	_ = again.cmd.Process.Signal(os.Interrupt)
}

// buildBinary builds the command into a temporary folder.
func buildBinary(t testing.TB) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "beamledger")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// serveEnv is the environment of `beamledger serve` over one database and one S3
// bucket, with fresh JWT and ledger keys: processes given the same environment
// share one facility.
func serveEnv(dbURL string, s3cfg objects.S3Config) []string {
	seed, ledgerSeed := make([]byte, 32), make([]byte, 32)
	_, _ = rand.Read(seed)
	_, _ = rand.Read(ledgerSeed)
	return []string{"BEAMLEDGER_DATABASE_URL=" + dbURL, "BEAMLEDGER_JWT_SIGNING_KEY=" + hex.EncodeToString(seed),
		"BEAMLEDGER_LEDGER_KEY=" + hex.EncodeToString(ledgerSeed),
		"BEAMLEDGER_LISTEN=127.0.0.1:0", "BEAMLEDGER_OBJECT_STORE=s3", "BEAMLEDGER_S3_ENDPOINT=" + s3cfg.Endpoint,
		"BEAMLEDGER_S3_REGION=" + s3cfg.Region, "BEAMLEDGER_S3_BUCKET=" + s3cfg.Bucket, "BEAMLEDGER_S3_ACCESS_KEY=" + s3cfg.AccessKey,
		"BEAMLEDGER_S3_SECRET_KEY=" + s3cfg.SecretKey, "BEAMLEDGER_S3_PATH_STYLE=true", "BEAMLEDGER_S3_CREATE_BUCKET=true"}
}

// waitFor polls ok until it holds, failing the test after d.
func waitFor(t testing.TB, d time.Duration, what string, ok func() bool) {
	t.Helper()
	for deadline := time.Now().Add(d); time.Now().Before(deadline); time.Sleep(100 * time.Millisecond) {
		if ok() {
			return
		}
	}
	t.Fatalf("waited %s for %s", d, what)
}
