# tautline — build, test, benchmark and demo.
# Every tool the build or tests need is installed from here (or .ci/run);
# nothing installed by hand is assumed.

GO            ?= go
GOBIN         := $(shell $(GO) env GOPATH)/bin
STATICCHECK   := honnef.co/go/tools/cmd/staticcheck@v0.8.2
BENCHTIME     ?= 1s
PKGS          := ./...

.PHONY: all build test test-race grpcurl-check bench-e2e vet fmt-check lint bench demo proto clean

all: build

build:
	$(GO) build $(PKGS)
	$(GO) build -o bin/ ./client/cmd/... ./server/cmd/... 2>/dev/null || true

## test: the README's test command; CI runs it through .ci/run. It also runs
## the server under the race detector and lets an outside gRPC client
## (grpcurl, installed at a pinned version) look at a running daemon.
test: fmt-check vet proto-check
	$(GO) test -count=1 $(PKGS)
	$(MAKE) test-race grpcurl-check

## test-race: the server under the race detector.
test-race:
	$(GO) test -race -count=1 ./server/...

## grpcurl-check: an outside client lists services by reflection and calls health and GetStatus (installs grpcurl v1.9.4; a few minutes the first time).
grpcurl-check:
	@GO=$(GO) sh server/grpcurl_check.sh

## bench-e2e: the 60 s end-to-end loopback figure (observation sent → command received).
bench-e2e:
	TAUTLINED_BENCH_SECONDS=60 $(GO) test -run '^$$' -bench DriveLoopback100Hz -benchtime 1x ./server/

vet:
	$(GO) vet $(PKGS)

fmt-check:
	@out=$$(gofmt -l $$(git ls-files '*.go' | grep -v '\.pb\.go$$')); \
	if [ -n "$$out" ]; then echo "gofmt would change:"; echo "$$out"; exit 1; fi

lint: vet
	$(GO) run $(STATICCHECK) $(PKGS)

## bench: every benchmark with allocation counts. Quote the machine with a figure.
bench:
	$(GO) test -run '^$$' -bench . -benchmem -benchtime $(BENCHTIME) $(PKGS)

## demo: open loop against closed loop on the invented demo cell; writes demo-out/.
demo:
	$(GO) run ./client/cmd/tautline check testdata/demo/cell.json testdata/demo/cue.csv
	$(GO) run ./client/cmd/tautline demo --out demo-out

## proto: regenerate proto/tautline/v1/*.pb.go with pinned tools (installs missing ones).
proto:
	@GO=$(GO) sh proto/generate.sh

## proto-check: fail if the committed generated code differs from what the pinned tools make.
.PHONY: proto-check
proto-check:
	@GO=$(GO) sh proto/generate.sh -check

clean:
	rm -rf bin

## certs: a development CA, server and client (controller, watcher)
## certificates in CERTS_DIR, for trying TLS out. Production certificates
## come from the site's own PKI.
CERTS_DIR     ?= certs
.PHONY: certs
certs:
	$(GO) run ./client/cmd/tautline certs -out $(CERTS_DIR)

## vuln: govulncheck against an offline vulnerability database built from
## the golang.org/x/vulndb module (the checker's online database may not
## be reachable). The database is built once per VULNDB_VERSION in the Go
## build cache. Exits non-zero when the code calls a known vulnerability.
GOVULNCHECK    := golang.org/x/vuln/cmd/govulncheck@v1.9.0
VULNDB_VERSION ?= v0.0.0-20261105234957-e22db6528018
VULNDB_DIR     ?= $(shell $(GO) env GOCACHE)/tautline-vulndb/$(VULNDB_VERSION)
.PHONY: vuln
vuln:
	$(GO) install $(GOVULNCHECK)
	@if [ ! -f "$(VULNDB_DIR)/index/db.json" ]; then \
		set -e; tmp=$$(mktemp -d); \
		dir=$$(cd $$tmp && $(GO) mod download -json golang.org/x/vulndb@$(VULNDB_VERSION) | \
			sed -n 's/^[[:space:]]*"Dir": "\(.*\)",*$$/\1/p'); \
		test -d "$$dir/data/osv" || { echo "vuln: golang.org/x/vulndb@$(VULNDB_VERSION) has no data/osv"; exit 1; }; \
		echo "vuln: indexing $$dir/data/osv into $(VULNDB_DIR)"; \
		rm -rf "$(VULNDB_DIR)"; mkdir -p "$(VULNDB_DIR)"; \
		(cd $$tmp && $(GO) run golang.org/x/vulndb/cmd/indexdb@$(VULNDB_VERSION) -vulns "$$dir/data/osv" -out "$(VULNDB_DIR)"); \
		rm -rf $$tmp; \
	fi
	$(GOBIN)/govulncheck -db file://$(VULNDB_DIR) $(PKGS)

## fit-demo: fit the demo figure to the demo's open-loop capture (run make demo first), then put the fitted cell to the test.
.PHONY: fit-demo
fit-demo:
	$(GO) run ./client/cmd/tautline fit demo-out/open-loop.tlcap --cell testdata/demo/cell.json --params string_rest_lengths,node_masses,damping --duration-s 3.9 --out demo-out/fitted-cell.json --compare-cue testdata/demo/cue.csv --compare-profile testdata/demo/standard.mismatch.json
