package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestBackupCommandArguments checks the command-line handling backup and restore
// share, before either touches a database: the folder count, the own flags of each,
// -pg-bin and the environment's settings. [constructed]
func TestBackupCommandArguments(t *testing.T) {
	t.Setenv("BEAMLEDGER_DATABASE_URL", "")
	t.Setenv("BEAMLEDGER_PG_BIN", "")
	ctx := context.Background()
	for _, tt := range []struct {
		args      []string
		wantErr   string
		wantUsage []string // in the usage printed to stderr
	}{
		{[]string{"backup"}, "backup: give one folder", []string{"usage: beamledger backup", "-with-objects", "-pg-bin"}},
		{[]string{"backup", "a", "b"}, "backup: give one folder", nil},
		{[]string{"restore"}, "restore: give one backup folder", []string{"usage: beamledger restore", "-s3-create-bucket", "-pg-bin"}},
		{[]string{"restore", "-with-objects=false", "x"}, "flag provided but not defined: -with-objects", nil},
		{[]string{"backup", "-s3-create-bucket", "x"}, "flag provided but not defined: -s3-create-bucket", nil},
		{[]string{"backup", "-pg-bin", "/nonexistent/pg", "x"}, "-pg-bin:", nil},
		{[]string{"restore", "-pg-bin", "/nonexistent/pg", "x"}, "-pg-bin:", nil},
	} {
		var out, errOut bytes.Buffer
		err := run(ctx, tt.args, &out, &errOut)
		if err == nil || !strings.Contains(err.Error(), tt.wantErr) {
			t.Errorf("%q: error %v, want one containing %q", tt.args, err, tt.wantErr)
		}
		for _, w := range tt.wantUsage {
			if !strings.Contains(errOut.String(), w) {
				t.Errorf("%q: usage lacks %q:\n%s", tt.args, w, errOut.String())
			}
		}
	}

	// The environment is read as by serve: a bad setting is named, and both a
	// secret and its _FILE form is refused, before any folder is made.
	dir := filepath.Join(t.TempDir(), "never")
	t.Setenv("BEAMLEDGER_S3_TLS", "maybe")
	for _, cmd := range []string{"backup", "restore"} {
		var out, errOut bytes.Buffer
		err := run(ctx, []string{cmd, dir}, &out, &errOut)
		if err == nil || !strings.Contains(err.Error(), "BEAMLEDGER_S3_TLS") {
			t.Errorf("%s with a bad BEAMLEDGER_S3_TLS: %v", cmd, err)
		}
	}
	t.Setenv("BEAMLEDGER_S3_TLS", "")
	os.Unsetenv("BEAMLEDGER_S3_TLS")
	t.Setenv("BEAMLEDGER_S3_SECRET_KEY", "x")
	t.Setenv("BEAMLEDGER_S3_SECRET_KEY_FILE", "y")
	for _, cmd := range []string{"backup", "restore"} {
		var out, errOut bytes.Buffer
		err := run(ctx, []string{cmd, dir}, &out, &errOut)
		if err == nil || !strings.Contains(err.Error(), "BEAMLEDGER_S3_SECRET_KEY or BEAMLEDGER_S3_SECRET_KEY_FILE") {
			t.Errorf("%s with a secret set twice: %v", cmd, err)
		}
	}
	if _, err := os.Stat(dir); !os.IsNotExist(err) {
		t.Errorf("a refused command made its folder: %v", err)
	}
}
