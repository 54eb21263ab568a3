package main

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"beamledger/storage/objects"
	"beamledger/storage/objects/objectstest"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// TestBackupRestore backs up a facility that a running server filled with records,
// data files and ledger events, restores the backup into a fresh database and a
// fresh bucket, and finds the ledger intact and every object sound there. Backups
// with one object byte or one manifest line changed are refused before anything is
// written, one whose manifest no longer matches its dump is refused and its records
// taken out again, and targets that are not empty are refused. The server also answers scrapes on
// its separate metrics listener, only with the token.
func TestBackupRestore(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs it against PostgreSQL and S3")
	}
	ctx := context.Background()
	srcURL := pgtest.NewDatabase(t)
	srcDB, err := postgres.Open(ctx, srcURL, 2)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srcDB.Close)
	srcS3 := objectstest.Config(t)
	objectstest.Open(t, srcS3)
	env := append(serveEnv(srcURL, srcS3), "BEAMLEDGER_METRICS_LISTEN=127.0.0.1:0", "BEAMLEDGER_METRICS_TOKEN=metrics-scrape-token-1")
	srv := startServe(t, buildBinary(t), env)
	base := "http://" + srv.addr
	projectID, token := researcherWithProject(t, srcDB, base)

	// Three uploads of two distinct contents, and specimens: records, objects and
	// ledger events.
	contents := [][]byte{testPattern(300 << 10), []byte("a diffraction pattern's worth of bytes"), testPattern(300 << 10)}
	for i, b := range contents {
		req, _ := http.NewRequest(http.MethodPost, fmt.Sprintf("%s/api/v1/files?project_id=%s&name=scan-%d.raw", base, projectID, i), bytes.NewReader(b))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", "application/octet-stream")
		// The third repeats the first's bytes and is answered with the same record.
		if res, err := http.DefaultClient.Do(req); err != nil || res.StatusCode != http.StatusCreated && res.StatusCode != http.StatusOK {
			t.Fatalf("upload %d: %v %v", i, res, err)
		}
	}
	for i := range 4 {
		body := fmt.Sprintf(`{"project_id":%q,"code":"BK-%d"}`, projectID, i)
		req, _ := http.NewRequest(http.MethodPost, base+"/api/v1/specimens", strings.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", "application/json")
		if res, err := http.DefaultClient.Do(req); err != nil || res.StatusCode != http.StatusCreated {
			t.Fatalf("specimen %d: %v %v", i, res, err)
		}
	}
	waitFor(t, 30*time.Second, "the ledger to be sealed", func() bool {
		n, _, err := srcDB.UnsealedEvents(ctx)
		return err == nil && n == 0
	})
	head, err := srcDB.LedgerHead(ctx)
	if err != nil || head.Size < 6 { // [constructed: two new files and four specimens]
		t.Fatalf("ledger after 2 new files and 4 specimens: size %d, %v", head.Size, err)
	}
	checkMetricsListener(t, srv)

	// The source facility is what the backup reads.
	useFacility(t, srcURL, srcS3)
	t.Setenv("BEAMLEDGER_LEDGER_KEY", envValue(env, "BEAMLEDGER_LEDGER_KEY"))
	dir := filepath.Join(t.TempDir(), "backup")
	var out, errOut bytes.Buffer
	if err := run(ctx, []string{"backup", dir}, &out, &errOut); err != nil {
		t.Fatalf("backup: %v\n%s", err, errOut.String())
	}
	m := readManifest(t, dir)
	// [constructed: three uploads, two of them the same bytes]
	if m.ObjectCount != 2 || len(m.Objects) != 2 || m.ObjectBytes != int64(len(contents[0])+len(contents[1])) || !m.ObjectsCopied {
		t.Fatalf("manifest: %d objects of %d bytes, copied %v", m.ObjectCount, m.ObjectBytes, m.ObjectsCopied)
	}
	if err := run(ctx, []string{"backup", dir}, &out, &errOut); err == nil {
		t.Error("a backup into a folder that is not empty was accepted")
	}

	// The targets: a database with nothing in it and a bucket with nothing in it.
	dstURL := emptyDatabase(t)
	dstS3 := objectstest.Config(t)
	dst := objectstest.Open(t, dstS3)
	useFacility(t, dstURL, dstS3)

	// Tampered backups are refused, and leave the targets empty.
	for name, tamper := range map[string]func(string){
		"an object byte changed": func(d string) {
			path := filepath.Join(d, objectsDir, filepath.FromSlash(m.Objects[0].Key))
			b, _ := os.ReadFile(path)
			b[len(b)/2] ^= 0x01
			writeFile(t, path, b)
		},
		"a manifest line changed": func(d string) {
			path := filepath.Join(d, manifestFile)
			b, _ := os.ReadFile(path)
			line := fmt.Sprintf(`"size_bytes":%d}`, m.Objects[1].SizeBytes)
			if !bytes.Contains(b, []byte(line)) {
				t.Fatalf("manifest has no line with %s:\n%s", line, b)
			}
			writeFile(t, path, bytes.Replace(b, []byte(line), []byte(fmt.Sprintf(`"size_bytes":%d}`, m.Objects[1].SizeBytes+1)), 1))
		},
		"an object taken out with its manifest line": func(d string) {
			// The manifest agrees with the folder, but no longer with the dump's records.
			cut := readManifest(t, d)
			gone := cut.Objects[1]
			cut.Objects, cut.ObjectCount, cut.ObjectBytes = cut.Objects[:1], 1, cut.ObjectBytes-gone.SizeBytes
			if err := os.Remove(filepath.Join(d, objectsDir, filepath.FromSlash(gone.Key))); err != nil {
				t.Fatal(err)
			}
			if err := os.Remove(filepath.Join(d, manifestFile)); err != nil {
				t.Fatal(err)
			}
			if err := writeManifest(filepath.Join(d, manifestFile), cut); err != nil {
				t.Fatal(err)
			}
		},
		"the dump cut short": func(d string) {
			path := filepath.Join(d, dumpFile)
			b, _ := os.ReadFile(path)
			writeFile(t, path, b[:len(b)-100])
		},
	} {
		bad := copyTree(t, dir)
		tamper(bad)
		errOut.Reset()
		err := run(ctx, []string{"restore", bad}, &out, &errOut)
		if exitCode(err) != exitFindings {
			t.Errorf("restore of a backup with %s: %v (exit %d), want exit %d", name, err, exitCode(err), exitFindings)
		}
		checkEmpty(t, dstURL, dst)
	}

	// A non-empty database is refused: the source itself.
	useFacility(t, srcURL, dstS3)
	if err := run(ctx, []string{"restore", dir}, &out, &errOut); err == nil || !errors.Is(err, postgres.ErrNotEmpty) {
		t.Errorf("restore over the source database: %v", err)
	}

	useFacility(t, dstURL, dstS3)
	out.Reset()
	if err := run(ctx, []string{"restore", dir}, &out, &errOut); err != nil {
		t.Fatalf("restore: %v\n%s", err, errOut.String())
	}
	if !strings.Contains(out.String(), "2 objects") {
		t.Errorf("restore printed %q", out.String())
	}
	out.Reset()
	if err := run(ctx, []string{"ledger", "verify"}, &out, &errOut); err != nil {
		t.Fatalf("ledger verify of the restored database: %v\n%s", err, out.String())
	}
	if want := fmt.Sprintf("ledger intact: size %d", head.Size); !strings.Contains(out.String(), want) {
		t.Errorf("ledger verify printed %q, want %q", out.String(), want)
	}
	out.Reset()
	errOut.Reset()
	if err := run(ctx, []string{"scrub"}, &out, &errOut); err != nil {
		t.Fatalf("scrub of the restored store: %v\n%s%s", err, out.String(), errOut.String())
	}
	if !strings.Contains(errOut.String(), "scrub done: 2 of 2 objects") || out.Len() != 0 {
		t.Errorf("scrub: findings %q, progress %q", out.String(), errOut.String())
	}
	// Restoring twice is refused: the target is no longer empty.
	if err := run(ctx, []string{"restore", dir}, &out, &errOut); err == nil {
		t.Error("a second restore into the restored database was accepted")
	}

	// A backup that lists the objects without copying them restores only against a
	// store that holds them: refused on the empty bucket, accepted on the source one.
	useFacility(t, srcURL, srcS3)
	listed := filepath.Join(t.TempDir(), "listed")
	if err := run(ctx, []string{"backup", "-with-objects=false", listed}, &out, &errOut); err != nil {
		t.Fatalf("backup -with-objects=false: %v", err)
	}
	if _, err := os.Stat(filepath.Join(listed, objectsDir)); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("a backup without objects has an objects folder: %v", err)
	}
	listedURL, bareS3 := emptyDatabase(t), objectstest.Config(t)
	bare := objectstest.Open(t, bareS3)
	useFacility(t, listedURL, bareS3)
	if err := run(ctx, []string{"restore", listed}, &out, &errOut); exitCode(err) != exitFindings {
		t.Errorf("restore of a listed backup into a store without its objects: %v (exit %d)", err, exitCode(err))
	}
	checkEmpty(t, listedURL, bare)
	useFacility(t, listedURL, srcS3)
	if err := run(ctx, []string{"restore", listed}, &out, &errOut); err != nil {
		t.Fatalf("restore of a listed backup beside its objects: %v", err)
	}
	errOut.Reset()
	if err := run(ctx, []string{"scrub"}, &out, &errOut); err != nil || !strings.Contains(errOut.String(), "scrub done: 2 of 2 objects") {
		t.Errorf("scrub after restoring a listed backup: %v %q", err, errOut.String())
	}
}

// checkMetricsListener scrapes the server's separate metrics listener without the
// token (refused) and with it (the uploads counted by route template and status).
func checkMetricsListener(t *testing.T, srv *serveProcess) {
	t.Helper()
	var addr string
	for _, l := range srv.logLines() {
		var line struct{ Msg, Addr string }
		if json.Unmarshal([]byte(l), &line) == nil && line.Msg == "metrics listening" {
			addr = line.Addr
		}
	}
	if addr == "" {
		t.Fatal("serve logged no metrics listener")
	}
	get := func(token string) (int, string) {
		req, _ := http.NewRequest(http.MethodGet, "http://"+addr+"/metrics", nil)
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return res.StatusCode, string(b)
	}
	if code, _ := get(""); code != http.StatusUnauthorized {
		t.Errorf("scrape without the token: status %d, want 401", code)
	}
	code, body := get("metrics-scrape-token-1")
	for _, want := range []string{`beamledger_http_requests_total{method="POST",route="/api/v1/files",status="201"} 2`,
		`beamledger_ledger_unsealed_events 0`, `beamledger_db_pool_connections{state="max"}`} {
		if code != http.StatusOK || !strings.Contains(body, want) {
			t.Errorf("scrape with the token: status %d, no %s", code, want)
		}
	}
}

// useFacility points the commands' environment at a database and a bucket.
func useFacility(t *testing.T, dbURL string, s3 objects.S3Config) {
	for k, v := range map[string]string{"BEAMLEDGER_DATABASE_URL": dbURL, "BEAMLEDGER_OBJECT_STORE": "s3",
		"BEAMLEDGER_S3_ENDPOINT": s3.Endpoint, "BEAMLEDGER_S3_REGION": s3.Region, "BEAMLEDGER_S3_BUCKET": s3.Bucket,
		"BEAMLEDGER_S3_ACCESS_KEY": s3.AccessKey, "BEAMLEDGER_S3_SECRET_KEY": s3.SecretKey, "BEAMLEDGER_S3_PATH_STYLE": "true"} {
		t.Setenv(k, v)
	}
}

func envValue(env []string, name string) string {
	for _, kv := range env {
		if v, ok := strings.CutPrefix(kv, name+"="); ok {
			return v
		}
	}
	return ""
}

// emptyDatabase creates a database with no schema on the test server and drops it
// after the test.
func emptyDatabase(t *testing.T) string {
	t.Helper()
	admin := os.Getenv(pgtest.EnvURL)
	u, err := url.Parse(admin)
	if err != nil {
		t.Fatal(err)
	}
	name := "beamledger_restore_" + strings.ToLower(rand.Text()[:10])
	if err := postgres.EnsureDatabase(context.Background(), admin, name); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if c, err := pgx.Connect(context.Background(), admin); err == nil {
			_, _ = c.Exec(context.Background(), "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)")
			c.Close(context.Background())
		}
	})
	u.Path = "/" + name
	return u.String()
}

// checkEmpty fails the test unless the database holds no table and the store no object.
func checkEmpty(t *testing.T, dbURL string, store objects.Store) {
	t.Helper()
	db, err := postgres.Open(context.Background(), dbURL, 1)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.CheckEmpty(context.Background()); err != nil {
		t.Errorf("target database after a refused restore: %v", err)
	}
	if err := checkStoreEmpty(context.Background(), store); err != nil {
		t.Errorf("target store after a refused restore: %v", err)
	}
}

func readManifest(t *testing.T, dir string) manifest {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, manifestFile))
	if err != nil {
		t.Fatal(err)
	}
	var m manifest
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatalf("manifest: %v\n%s", err, b)
	}
	return m
}

func writeFile(t *testing.T, path string, b []byte) {
	t.Helper()
	if err := os.WriteFile(path, b, 0o600); err != nil {
		t.Fatal(err)
	}
}

// copyTree copies a backup folder, to tamper with the copy.
func copyTree(t *testing.T, src string) string {
	t.Helper()
	dst := filepath.Join(t.TempDir(), "copy")
	err := os.CopyFS(dst, os.DirFS(src))
	if err != nil {
		t.Fatal(err)
	}
	return dst
}
