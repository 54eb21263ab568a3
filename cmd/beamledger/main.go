// Command beamledger is the beamledger server and its administration tool.
//
//	beamledger serve                       run the server (production)
//	beamledger demo                        run the embedded demo (what `make run` does)
//	beamledger migrate up|status           apply or list schema migrations
//	beamledger user create|set-role|disable|reset-password
//	beamledger token create|revoke         instrument-agent tokens
//	beamledger derive < conditions.json    derived optics quantities (exit 2 on bad input)
//	beamledger upload -server URL -acquisition ID PATH...   resumable upload of data files
//	beamledger verify-bundle BUNDLE.zip --key KEY   check a provenance bundle offline
//	beamledger scrub                       check stored objects against their SHA-256
//	beamledger ledger verify|checkpoint|key check the ledger, sign a checkpoint, print the key
//	beamledger backup DIR                  dump, object manifest and objects from one snapshot
//	beamledger restore DIR                 into an empty database and object store
//	beamledger version
//
// Settings come from flags or BEAMLEDGER_* environment variables; secrets also from
// files named by BEAMLEDGER_*_FILE. Run `beamledger serve -h` for the list.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"runtime/debug"
	"strings"
	"syscall"
)

// version is set by the linker (-X main.version=…); the build info is the fallback.
var version = ""

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := runWithStdin(ctx, os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	if err != nil {
		if !errors.Is(err, flag.ErrHelp) {
			fmt.Fprintln(os.Stderr, "beamledger:", err)
		}
		os.Exit(exitCode(err))
	}
}

// exitCode is 1 for a failure, or the status an *exitError carries (2 for refused
// input), so scripts can tell the two apart.
func exitCode(err error) int {
	var ee *exitError
	if errors.As(err, &ee) {
		return ee.code
	}
	return 1
}

const usage = `usage: beamledger <command> [flags]

commands:
  serve                                   run the server
  demo                                    run the embedded demo facility (make run)
  migrate up|status                       apply or list schema migrations
  user create|set-role|disable|reset-password
  token create|revoke                     instrument-agent tokens
  derive [-settings FILE] < conditions    derived optics quantities as JSON (exit 2 on bad input)
  upload -server URL (-acquisition ID | -project ID) FILE-OR-FOLDER...
                                          resumable upload of data files (token in $BEAMLEDGER_TOKEN)
  verify-bundle BUNDLE.zip --key KEY      check a provenance bundle offline, no server needed
  scrub                                   re-read stored objects and check their SHA-256
  ledger verify|checkpoint|key            check the ledger, sign a checkpoint now, print the verifier key
  backup [-with-objects=false] DIR        database dump, object manifest and objects, from one snapshot
  restore DIR                             restore a backup into an empty database and object store
  version                                 print the version
`

// run is runWithStdin for the commands that read no standard input: they get an
// empty one.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	return runWithStdin(ctx, args, strings.NewReader(""), stdout, stderr)
}

// runWithStdin dispatches one command, with the standard streams passed in so tests
// can use buffers.
func runWithStdin(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		fmt.Fprint(stderr, usage)
		return errors.New("no command given")
	}
	cmd, rest := args[0], args[1:]
	switch cmd {
	case "serve":
		return cmdServe(ctx, rest, stderr)
	case "demo":
		return cmdDemo(ctx, rest, stdout, stderr)
	case "migrate":
		return cmdMigrate(ctx, rest, stdout, stderr)
	case "user":
		return cmdUser(ctx, rest, stdout, stderr)
	case "token":
		return cmdToken(ctx, rest, stdout, stderr)
	case "derive":
		return cmdDerive(rest, stdin, stdout, stderr)
	case "upload":
		return cmdUpload(ctx, rest, stdout, stderr)
	case "verify-bundle":
		return cmdVerifyBundle(rest, stdout, stderr)
	case "scrub":
		return cmdScrub(ctx, rest, stdout, stderr)
	case "ledger":
		return cmdLedger(ctx, rest, stdout, stderr)
	case "backup":
		return cmdBackup(ctx, rest, stdout, stderr)
	case "restore":
		return cmdRestore(ctx, rest, stdout, stderr)
	case "version":
		fmt.Fprintln(stdout, "beamledger", buildVersion())
		return nil
	case "help", "-h", "--help":
		fmt.Fprint(stdout, usage)
		return nil
	}
	fmt.Fprint(stderr, usage)
	return fmt.Errorf("unknown command %q", cmd)
}

func buildVersion() string {
	if version != "" {
		return version
	}
	if bi, ok := debug.ReadBuildInfo(); ok {
		rev, dirty := "", ""
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				rev = s.Value
			case "vcs.modified":
				if s.Value == "true" {
					dirty = "+dirty"
				}
			}
		}
		if rev != "" {
			return bi.Main.Version + " " + rev + dirty
		}
		return bi.Main.Version
	}
	return "unknown"
}

func newLogger(w io.Writer, level slog.Level) *slog.Logger {
	return slog.New(slog.NewJSONHandler(w, &slog.HandlerOptions{Level: level}))
}
