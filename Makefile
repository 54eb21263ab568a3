# Everyday entry points. The test and bench targets run under deploy/testenv,
# which starts a throwaway PostgreSQL (installing it when root and missing)
# and removes it afterwards, so they need no setup beyond Go.

GO ?= go

.PHONY: run test bench faults build fmt-check

run:
	$(GO) run ./cmd/beamledger demo

test: fmt-check
	$(GO) run ./deploy/testenv -- sh -c '$(GO) vet ./... && $(GO) test -count=1 -timeout 30m ./...'

# Every benchmark beside its anchor, in one run, written to BENCHMARKS.md with the
# machine, versions, medians and ratios (deploy/benchreport). SUITES=booking,ledger
# runs some; the suites are booking, files (about 12 GiB of disk), ledger, trace,
# cost-recovery and ledger-append. The whole run takes about 15 minutes on 2 cores.
SUITES ?=
bench:
	$(GO) run ./deploy/testenv -- $(GO) run ./deploy/benchreport -only '$(SUITES)'

# The fault suite, one fault at a time, written to RELIABILITY.md with each test's
# figures (deploy/faultreport). FUZZTIME is per fuzz target; the default keeps the
# whole run near 30 minutes on 2 cores; FUZZTIME=10m fuzzes each parser for ten.
FUZZTIME ?= 4m
FAULTS ?=
faults:
	$(GO) run ./deploy/testenv -- $(GO) run ./deploy/faultreport -fuzztime $(FUZZTIME) -only '$(FAULTS)'

build:
	$(GO) build -o bin/beamledger ./cmd/beamledger

# .data is skipped: it holds the dev cluster, whose directories belong to the
# postgres user and may hold anything.
fmt-check:
	@unformatted=$$(find . -path ./.data -prune -o -name '*.go' -type f -print | xargs -r gofmt -l); \
	if [ -n "$$unformatted" ]; then echo "gofmt -l lists files to format:"; echo "$$unformatted"; exit 1; fi
