# Everyday entry points. The test and bench targets run under deploy/testenv,
# which starts a throwaway PostgreSQL (installing it when root and missing)
# and removes it afterwards, so they need no setup beyond Go.

GO ?= go

.PHONY: run test bench build fmt-check

run:
	$(GO) run ./cmd/beamledger demo

test: fmt-check
	$(GO) run ./deploy/testenv -- sh -c '$(GO) vet ./... && $(GO) test -count=1 ./...'

bench:
	$(GO) run ./deploy/testenv -- $(GO) test -run '^$$' -bench . -benchtime 3000x ./...

build:
	$(GO) build -o bin/beamledger ./cmd/beamledger

# .data is skipped: it holds the dev cluster, whose directories belong to the
# postgres user and may hold anything.
fmt-check:
	@unformatted=$$(find . -path ./.data -prune -o -name '*.go' -type f -print | xargs -r gofmt -l); \
	if [ -n "$$unformatted" ]; then echo "gofmt -l lists files to format:"; echo "$$unformatted"; exit 1; fi
