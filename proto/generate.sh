#!/bin/sh
# generate.sh regenerates the Go code from the .proto files with pinned
# tools, installing any that are missing. `make proto` runs it; `make
# proto-check` runs it with -check, which regenerates into a temporary
# directory and fails if the committed code differs.
#
# Pinned tools:
#   protoc              Debian's protobuf-compiler (bookworm: libprotoc 3.21.12)
#   protoc-gen-go       google.golang.org/protobuf/cmd/protoc-gen-go v1.36.12
#   protoc-gen-go-grpc  google.golang.org/grpc/cmd/protoc-gen-go-grpc v1.6.2
set -eu

cd "$(dirname "$0")/.."
GO=${GO:-go}
GEN_GO=google.golang.org/protobuf/cmd/protoc-gen-go
GEN_GO_VERSION=v1.36.12
GEN_GRPC=google.golang.org/grpc/cmd/protoc-gen-go-grpc
GEN_GRPC_VERSION=v1.6.2
PROTOC_WANT="libprotoc 3.21.12"
PROTO_DIR=proto/tautline/v1

check=false
case "${1:-}" in
-check) check=true ;;
"") ;;
*) echo "usage: $0 [-check]" >&2; exit 2 ;;
esac

say() { echo "proto: $*" >&2; }

# protoc: from Debian's package when absent.
PROTOC=$(command -v protoc || true)
if [ -z "$PROTOC" ]; then
	if [ "$(id -u)" != 0 ]; then
		say "protoc is missing; install it with: sudo apt-get install protobuf-compiler"
		exit 1
	fi
	say "installing protoc (Debian protobuf-compiler)"
	log=$(mktemp)
	if ! { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq protobuf-compiler; } >"$log" 2>&1; then
		cat "$log" >&2
		rm -f "$log"
		say "installing protobuf-compiler failed"
		exit 1
	fi
	rm -f "$log"
	PROTOC=/usr/bin/protoc
fi
if [ "$("$PROTOC" --version)" != "$PROTOC_WANT" ]; then
	say "warning: protoc is '$("$PROTOC" --version)', the committed code was made with '$PROTOC_WANT'"
fi

# The plugins: into GOBIN (default GOPATH/bin) when absent or of another version.
gobin=$($GO env GOBIN)
[ -n "$gobin" ] || gobin=$($GO env GOPATH)/bin
if [ "$("$gobin/protoc-gen-go" --version 2>/dev/null || true)" != "protoc-gen-go $GEN_GO_VERSION" ]; then
	say "installing $GEN_GO@$GEN_GO_VERSION"
	GOBIN=$gobin $GO install "$GEN_GO@$GEN_GO_VERSION"
fi
if [ "$("$gobin/protoc-gen-go-grpc" --version 2>/dev/null || true)" != "protoc-gen-go-grpc ${GEN_GRPC_VERSION#v}" ]; then
	say "installing $GEN_GRPC@$GEN_GRPC_VERSION"
	GOBIN=$gobin $GO install "$GEN_GRPC@$GEN_GRPC_VERSION"
fi

generate() { # generate OUTDIR: writes OUTDIR/$PROTO_DIR/*.pb.go
	"$PROTOC" -I proto \
		--plugin=protoc-gen-go="$gobin/protoc-gen-go" \
		--plugin=protoc-gen-go-grpc="$gobin/protoc-gen-go-grpc" \
		--go_out="$1" --go_opt=module=tautline \
		--go-grpc_out="$1" --go-grpc_opt=module=tautline \
		"$PROTO_DIR"/*.proto
}

if ! $check; then
	rm -f "$PROTO_DIR"/*.pb.go
	generate .
	exit 0
fi

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
mkdir -p "$tmp/$PROTO_DIR"
generate "$tmp"
# Compare every generated file both ways, ignoring only the line that names
# protoc's version (warned about above).
strip() { grep -v '^//[[:space:]]*protoc[[:space:]]*v' "$1" || true; }
bad=""
for f in "$tmp/$PROTO_DIR"/*.pb.go; do
	c="$PROTO_DIR/$(basename "$f")"
	if [ ! -f "$c" ] || [ "$(strip "$f")" != "$(strip "$c")" ]; then
		bad="$bad $c"
	fi
done
for c in "$PROTO_DIR"/*.pb.go; do
	[ -f "$tmp/$PROTO_DIR/$(basename "$c")" ] || bad="$bad $c(stale)"
done
if [ -n "$bad" ]; then
	say "generated code is out of date:$bad"
	say "run 'make proto' and commit the result"
	exit 1
fi
