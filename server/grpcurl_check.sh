#!/usr/bin/env sh
# grpcurl_check.sh: an outside client (grpcurl, not ours) sees tautlined's
# API. Installs grpcurl v1.9.4 if missing, starts tautlined on the demo cell
# on a free loopback port, lists the services by reflection, calls the health
# check and GetStatus, then stops the daemon with SIGTERM and checks that it
# shut down cleanly. Run from the repository root: sh server/grpcurl_check.sh
set -eu
GO=${GO:-go}
GOBIN=$($GO env GOPATH)/bin
GRPCURL=$GOBIN/grpcurl
# go install prints no version into the binary ("dev build"), so ask the
# module data instead; go install is a no-op when the pinned build is there.
if ! $GO version -m "$GRPCURL" 2>/dev/null | grep -q 'github.com/fullstorydev/grpcurl[[:space:]]*v1.9.4'; then
	echo "installing grpcurl v1.9.4 (this takes a few minutes the first time)"
	$GO install github.com/fullstorydev/grpcurl/cmd/grpcurl@v1.9.4
fi

work=$(mktemp -d)
pid=
cleanup() {
	if [ -n "$pid" ] && kill -0 "$pid" 2>/dev/null; then kill -KILL "$pid"; fi
	rm -rf "$work"
}
trap cleanup EXIT INT TERM

$GO build -o "$work/tautlined" ./server/cmd/tautlined
"$work/tautlined" -listen 127.0.0.1:0 -metrics-listen 127.0.0.1:0 -cell testdata/demo/cell.json -capture-dir "$work/captures" 2>"$work/log" &
pid=$!

addr=
for _ in $(seq 1 100); do
	addr=$(sed -n 's/.*"msg":"serving","address":"\([^"]*\)".*/\1/p' "$work/log" | head -n 1)
	[ -n "$addr" ] && break
	sleep 0.1
done
if [ -z "$addr" ]; then
	echo "tautlined did not start:"; cat "$work/log"; exit 1
fi
echo "tautlined serving on $addr"

fail() { echo "FAIL: $*"; cat "$work/log"; exit 1; }

services=$("$GRPCURL" -plaintext "$addr" list)
echo "$services"
for s in tautline.v1.CellControl grpc.health.v1.Health; do
	echo "$services" | grep -qx "$s" || fail "reflection does not list $s"
done

for svc in "" tautline.v1.CellControl; do
	out=$("$GRPCURL" -plaintext -d "{\"service\":\"$svc\"}" "$addr" grpc.health.v1.Health/Check)
	echo "$out"
	echo "$out" | grep -q '"status": "SERVING"' || fail "health of \"$svc\" is not SERVING"
done

out=$("$GRPCURL" -plaintext -d '{"cell_name":"demo-jellyfish"}' "$addr" tautline.v1.CellControl/GetStatus)
echo "$out"
echo "$out" | grep -q '"state": "SESSION_STATE_IDLE"' || fail "GetStatus did not report idle"

kill -TERM "$pid"
if ! wait "$pid"; then fail "tautlined did not exit cleanly on SIGTERM"; fi
pid=
grep -q '"msg":"stopped"' "$work/log" || fail "no clean stop in the log"
echo "grpcurl check passed"
