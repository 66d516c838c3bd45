#!/usr/bin/env bash
# The full test suite of drainsight: formatting, vet, staticcheck, and every test under the
# race detector, with the InfluxDB integration tests run against a real InfluxDB OSS 1.8.10
# that scripts/influxd.sh builds (cached) and starts on a loopback port.
#
# Usage: scripts/test.sh            full suite (what CI runs)
#        DRAINSIGHT_NO_INFLUX=1 scripts/test.sh   skip the server (integration tests then skip)
set -euo pipefail
cd "$(dirname "$0")/.."

echo "== gofmt"
bad=$(gofmt -l $(git ls-files '*.go' 2>/dev/null || find . -name '*.go'))
if [ -n "$bad" ]; then
	echo "gofmt would change:"; echo "$bad"; exit 1
fi

echo "== go mod tidy -diff (go.mod and go.sum list exactly what the code imports)"
go mod tidy -diff

echo "== go vet"
go vet ./...

echo "== staticcheck"
go run honnef.co/go/tools/cmd/staticcheck@v0.8.2 ./...

echo "== go test -race (unit and end-to-end tests; InfluxDB integration tests skip here)"
env -u DRAINSIGHT_INFLUX_URL -u DRAINSIGHT_INFLUX_BUCKET go test -race -count=1 ./...

if [ "${DRAINSIGHT_NO_INFLUX:-}" = "1" ]; then
	echo "== InfluxDB integration tests skipped (DRAINSIGHT_NO_INFLUX=1)"
else
	# One package at a time: some tests kill and restart the shared server.
	echo "== go test -race: InfluxDB integration tests against a real InfluxDB OSS 1.8.10"
	scripts/influxd.sh run -- go test -race -count=1 -p 1 -run 'Integration|Influx' ./...
fi
echo "== all tests passed"
