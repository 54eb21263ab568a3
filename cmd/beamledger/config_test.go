package main

import (
	"flag"
	"io"
	"strings"
	"testing"

	"beamledger/server"
)

// TestS3SignPayloadSetting: serve and the commands that share its object
// settings take BEAMLEDGER_S3_SIGN_PAYLOAD, a flag overriding it, and name the
// variable when its value is not a boolean.
func TestS3SignPayloadSetting(t *testing.T) {
	parse := func(args ...string) (server.Config, error) {
		cfg := server.Defaults()
		fs := flag.NewFlagSet("serve", flag.ContinueOnError)
		fs.SetOutput(io.Discard)
		done := serverFlags(fs, &cfg)
		if err := fs.Parse(args); err != nil {
			return cfg, err
		}
		return cfg, done()
	}
	if cfg, _ := parse(); cfg.S3.SignPayload {
		t.Error("payloads are signed by default; the default is a CRC32C")
	}
	t.Setenv("BEAMLEDGER_S3_SIGN_PAYLOAD", "true")
	if cfg, _ := parse(); !cfg.S3.SignPayload {
		t.Error("BEAMLEDGER_S3_SIGN_PAYLOAD=true was not taken")
	}
	if cfg, _ := parse("-s3-sign-payload=false"); cfg.S3.SignPayload {
		t.Error("the flag did not override the environment")
	}
	t.Setenv("BEAMLEDGER_S3_SIGN_PAYLOAD", "sometimes")
	if _, err := parse(); err == nil || !strings.Contains(err.Error(), "BEAMLEDGER_S3_SIGN_PAYLOAD") {
		t.Errorf("a bad value: %v, want an error naming the variable", err)
	}
}
