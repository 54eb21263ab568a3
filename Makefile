# Everyday entry points. The test and bench targets run under deploy/testenv,
# which starts a throwaway PostgreSQL (installing it when root and missing)
# and removes it afterwards, so they need no setup beyond Go.

GO ?= go

.PHONY: run test bench bench-files bench-ledger build fmt-check

run:
	$(GO) run ./cmd/beamledger demo

test: fmt-check
	$(GO) run ./deploy/testenv -- sh -c '$(GO) vet ./... && $(GO) test -count=1 ./...'

# The booking benchmark: raw inserts against bookings through the HTTP stack.
bench:
	$(GO) run ./deploy/testenv -- $(GO) test -run '^$$' -bench BookingCreate -benchtime 3000x ./server/

# The data-file benchmarks, in one harness against one S3 server: raw PutObject
# against the upload endpoint, a plain SHA-256 pass against scrub, and the
# server's peak memory while uploading 1 GiB and 4 GiB. Needs about 12 GiB of disk.
bench-files:
	$(GO) run ./deploy/testenv -- $(GO) test -run '^$$' -bench 'RawPutObject|FileUpload|UploadCommand|Scrub' -benchtime 1x -timeout 30m ./storage/objects/ ./server/ ./cmd/beamledger/

# The ledger benchmark over a million events: verify against a plain SHA-256 pass
# over the same bytes, and inclusion-proof latency. About five minutes.
bench-ledger:
	$(GO) run ./deploy/testenv -- $(GO) test -run '^$$' -bench Ledger -benchtime 3x -timeout 30m ./storage/postgres/

build:
	$(GO) build -o bin/beamledger ./cmd/beamledger

# .data is skipped: it holds the dev cluster, whose directories belong to the
# postgres user and may hold anything.
fmt-check:
	@unformatted=$$(find . -path ./.data -prune -o -name '*.go' -type f -print | xargs -r gofmt -l); \
	if [ -n "$$unformatted" ]; then echo "gofmt -l lists files to format:"; echo "$$unformatted"; exit 1; fi
