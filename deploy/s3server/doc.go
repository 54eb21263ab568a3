// Package s3server runs a private S3-compatible server, versitygw with its
// POSIX back end, for the test harness and for tests that need a server of
// their own (one they can stop, say).
//
// EnsureBinary builds versitygw once with `go install` into a git-ignored
// folder of the checkout (.cache/bin) and reuses it afterwards, so the only
// thing a machine needs is Go and the module proxy. Start runs it on a free
// 127.0.0.1 port over a fresh temporary folder with generated keys; Stop kills
// its process group and removes the folder.
//
// The package uses the standard library only, like deploy/pgcluster, so
// that the harness every other package's tests run under depends on nothing
// it could break.
package s3server
