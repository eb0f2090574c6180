# tautline — build, test, benchmark and demo.
# Every tool the build or tests need is installed from here (or .ci/run);
# nothing installed by hand is assumed.

GO            ?= go
GOBIN         := $(shell $(GO) env GOPATH)/bin
STATICCHECK   := honnef.co/go/tools/cmd/staticcheck@v0.8.2
BENCHTIME     ?= 1s
PKGS          := ./...

.PHONY: all build test test-short vet fmt-check lint bench demo proto clean

all: build

build:
	$(GO) build $(PKGS)
	$(GO) build -o bin/ ./client/cmd/... ./server/cmd/... 2>/dev/null || true

## test: the README's test command; CI runs it through .ci/run.
test: fmt-check vet proto-check
	$(GO) test -count=1 $(PKGS)

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
