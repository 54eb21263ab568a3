package main

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"

	"beamledger/accounts"
	"beamledger/demo"
	"beamledger/deploy/pgcluster"
	"beamledger/provenance"
	"beamledger/server"
	"beamledger/storage/objects"
	"beamledger/storage/postgres"
)

// cmdDemo runs the whole product on its embedded default: a private PostgreSQL cluster
// under .data/postgres, objects on local disk under .data/objects, the demo facility
// loaded, and the server on 127.0.0.1:8080. Ctrl-C stops the server, then the cluster.
func cmdDemo(ctx context.Context, args []string, stdout, stderr io.Writer) (err error) {
	fl := flag.NewFlagSet("demo", flag.ContinueOnError)
	fl.SetOutput(stderr)
	dataDir := fl.String("data", ".data", "directory for the demo's database, objects and keys")
	listen := fl.String("listen", "127.0.0.1:8080", "address to listen on")
	if err := fl.Parse(args); err != nil {
		return err
	}
	log := newLogger(stderr, logLevelFromEnv())
	dir, err := filepath.Abs(*dataDir)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return err
	}
	cluster, err := startDemoCluster(ctx, dir, stderr)
	if err != nil {
		return err
	}
	defer func() {
		fmt.Fprintln(stdout, "stopping the private PostgreSQL cluster")
		err = errors.Join(err, cluster.Stop())
	}()
	db, err := openDemoDatabase(ctx, cluster, log)
	if err != nil {
		return err
	}
	defer db.Close()

	cfg, secret, err := demoConfig(dir, *listen, cluster.URL("beamledger"))
	if err != nil {
		return err
	}
	hasher := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), cfg.HashConcurrency)
	accts, err := demo.Load(ctx, db, hasher, secret, time.Now())
	if err != nil {
		return fmt.Errorf("load demo facility: %w", err)
	}
	if err := demo.LoadWeek(ctx, db, db, time.Now()); err != nil {
		return fmt.Errorf("load demo week: %w", err)
	}
	if err := demo.LoadAcquisitions(ctx, db, db, db, time.Now()); err != nil {
		return fmt.Errorf("load demo acquisitions: %w", err)
	}
	if err := demo.LoadBilling(ctx, db, db, db, time.Now()); err != nil {
		return fmt.Errorf("load demo billing: %w", err)
	}
	objs, err := server.OpenObjects(cfg)
	if err != nil {
		return err
	}
	put := func(ctx context.Context, digest string, data []byte) (string, error) {
		_, err := objs.Put(ctx, provenance.ObjectKey(digest), bytes.NewReader(data), int64(len(data)), objects.PutOptions{})
		return objs.Name(), err
	}
	if err := demo.LoadFiles(ctx, db, db, db, put, time.Now()); err != nil {
		return fmt.Errorf("load demo data files: %w", err)
	}
	log.Info("starting beamledger demo", slog.String("version", buildVersion()), slog.Any("config", cfg))
	return server.Run(ctx, cfg, db, log, func(addr string) { printDemoBanner(stdout, addr, accts) })
}

func startDemoCluster(ctx context.Context, dir string, stderr io.Writer) (*pgcluster.Cluster, error) {
	bins, err := pgcluster.EnsureBinaries(ctx, stderr)
	if err != nil {
		return nil, err
	}
	pw, err := readOrCreateSecret(filepath.Join(dir, "postgres.password"))
	if err != nil {
		return nil, err
	}
	logFile, err := os.OpenFile(filepath.Join(dir, "postgres.log"), os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o600)
	if err != nil {
		return nil, err
	}
	c, err := pgcluster.Start(ctx, pgcluster.Options{DataDir: filepath.Join(dir, "postgres"), Password: pw, Binaries: bins, Log: logFile})
	if err != nil {
		logFile.Close()
		return nil, fmt.Errorf("start private PostgreSQL (log: %s): %w", logFile.Name(), err)
	}
	return c, nil
}

func openDemoDatabase(ctx context.Context, c *pgcluster.Cluster, log *slog.Logger) (*postgres.DB, error) {
	if err := postgres.EnsureDatabase(ctx, c.URL("postgres"), "beamledger"); err != nil {
		return nil, err
	}
	db, err := postgres.Open(ctx, c.URL("beamledger"), 0)
	if err != nil {
		return nil, err
	}
	if _, err := db.Migrate(ctx, log); err != nil {
		db.Close()
		return nil, err
	}
	return db, nil
}

// demoConfig is the server configuration of the demo; its signing key and the demo
// password secret are made on the first run and kept in dir.
func demoConfig(dir, listen, dbURL string) (server.Config, []byte, error) {
	cfg := server.Defaults()
	cfg.Demo = true
	cfg.ListenAddr = listen
	cfg.DatabaseURL = dbURL
	cfg.ObjectStore = "disk"
	cfg.ObjectDir = filepath.Join(dir, "objects")
	if err := os.MkdirAll(cfg.ObjectDir, 0o700); err != nil {
		return cfg, nil, err
	}
	seed, err := readOrCreateSecret(filepath.Join(dir, "jwt-signing.seed"))
	if err != nil {
		return cfg, nil, err
	}
	raw, err := hex.DecodeString(seed)
	if err != nil || len(raw) != ed25519.SeedSize {
		return cfg, nil, fmt.Errorf("%s is damaged; delete it to make a new key", filepath.Join(dir, "jwt-signing.seed"))
	}
	cfg.SigningKey = ed25519.NewKeyFromSeed(raw)
	// The ledger's key is kept apart from the JWT key, as a deployment's must be.
	ledgerSeed, err := readOrCreateSecret(filepath.Join(dir, "ledger-signing.seed"))
	if err != nil {
		return cfg, nil, err
	}
	if raw, err = hex.DecodeString(ledgerSeed); err != nil || len(raw) != ed25519.SeedSize {
		return cfg, nil, fmt.Errorf("%s is damaged; delete it to make a new key", filepath.Join(dir, "ledger-signing.seed"))
	}
	cfg.LedgerKey = ed25519.NewKeyFromSeed(raw)
	cfg.LedgerOrigin = "demo.beamledger.localhost/ledger"
	secret, err := readOrCreateSecret(filepath.Join(dir, "demo.secret"))
	if err != nil {
		return cfg, nil, err
	}
	return cfg, []byte(secret), cfg.Validate()
}

// readOrCreateSecret returns the hex secret in path, writing 32 fresh random bytes
// there (mode 0600) on first use.
func readOrCreateSecret(path string) (string, error) {
	b, err := os.ReadFile(path)
	if err == nil {
		return strings.TrimSpace(string(b)), nil
	}
	if !errors.Is(err, fs.ErrNotExist) {
		return "", err
	}
	buf := make([]byte, 32)
	if _, err := rand.Read(buf); err != nil {
		return "", err
	}
	s := hex.EncodeToString(buf)
	if err := os.WriteFile(path, []byte(s+"\n"), 0o600); err != nil {
		return "", err
	}
	return s, nil
}

func printDemoBanner(w io.Writer, addr string, accts []demo.Account) {
	fmt.Fprintf(w, "\nbeamledger demo facility %q is running at http://%s/\n", demo.Facility.Name, addr)
	fmt.Fprintln(w, "demo accounts (demo mode only):")
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	for _, a := range accts {
		fmt.Fprintf(tw, "  %s\t%s\t%s\n", a.Role, a.Email, a.Password)
	}
	tw.Flush()
	fmt.Fprintln(w, "press Ctrl-C to stop")
}
