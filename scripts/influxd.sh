#!/usr/bin/env bash
# influxd.sh: a throw-away InfluxDB OSS 1.8.10 test server on loopback.
#
#   scripts/influxd.sh build
#       Build influxd 1.8.10 with `go install` into $DRAINSIGHT_CACHE/bin
#       (default ~/.cache/drainsight/bin). Skipped when a working binary is there.
#
#   scripts/influxd.sh run [--no-auth] -- <command...>
#       Build if needed, start influxd on a free 127.0.0.1 port with a temporary
#       data dir, wait for /ping, create the database, run <command> with the
#       environment below, stop the server and remove the dir (also on Ctrl-C),
#       and exit with <command>'s exit code. Example:
#           scripts/influxd.sh run -- go test ./ingest/influx/ -run Integration -v
#
# Environment given to <command>:
#   DRAINSIGHT_INFLUX_URL     http://127.0.0.1:<port>
#   DRAINSIGHT_INFLUX_BUCKET  <db>/autogen
#   DRAINSIGHT_INFLUX_DB      <db> (default drainsight, override by setting it)
#   DRAINSIGHT_INFLUX_TOKEN   "admin:pass" (auth on, the default) or "" (--no-auth)
#   DRAINSIGHT_INFLUXD_DIR    the temporary dir (data, influxd.log, pid)
#   DRAINSIGHT_INFLUXD_PID    the server's pid at start; the current one is in $DIR/pid
#   DRAINSIGHT_INFLUXD_START  a script that starts the server again on the same port and
#                             data (for tests that kill it) and writes $DIR/pid
#
# Every listener is bound to 127.0.0.1; usage reporting is off. Requires go and curl.
set -euo pipefail

VERSION=v1.8.10
CACHE="${DRAINSIGHT_CACHE:-$HOME/.cache/drainsight}"
BIN="$CACHE/bin"
INFLUXD="$BIN/influxd"
DB="${DRAINSIGHT_INFLUX_DB:-drainsight}"
ADMIN_USER=admin
ADMIN_PASS=pass

say() { printf 'influxd.sh: %s\n' "$*" >&2; }
die() { say "$*"; exit 2; }

build() {
	if [ -x "$INFLUXD" ] && "$INFLUXD" version >/dev/null 2>&1; then
		say "using $INFLUXD"
		return 0
	fi
	command -v go >/dev/null || die "go is not on PATH"
	mkdir -p "$BIN"
	say "building influxd $VERSION into $BIN (a few minutes, about 62 MB)"
	GOBIN="$BIN" go install "github.com/influxdata/influxdb/cmd/influxd@$VERSION"
	"$INFLUXD" version >/dev/null || die "built $INFLUXD does not run"
}

# free_port prints a loopback TCP port nobody listens on (racy by nature; the
# server start below fails loudly if someone takes it first).
free_port() {
	local p i
	for i in $(seq 1 200); do
		p=$((20000 + RANDOM % 40000))
		if ! (exec 3<>"/dev/tcp/127.0.0.1/$p") 2>/dev/null; then
			echo "$p"
			return 0
		fi
	done
	die "no free port found"
}

query() { # query <statement> [curl args...]
	local q="$1"
	shift
	curl -fsS -XPOST "$DRAINSIGHT_INFLUX_URL/query" "$@" --data-urlencode "q=$q" >/dev/null
}

run() {
	local auth=true
	while [ $# -gt 0 ]; do
		case "$1" in
		--no-auth) auth=false; shift ;;
		--) shift; break ;;
		*) die "unknown option $1 (usage: influxd.sh run [--no-auth] -- command...)" ;;
		esac
	done
	[ $# -gt 0 ] || die "no command given (usage: influxd.sh run [--no-auth] -- command...)"
	command -v curl >/dev/null || die "curl is not on PATH"
	build

	local dir http rpc
	dir="$(mktemp -d "${TMPDIR:-/tmp}/drainsight-influxd.XXXXXX")"
	http="$(free_port)"
	rpc="$(free_port)"
	[ "$http" != "$rpc" ] || rpc="$(free_port)"

	# A start script that tests can call again after killing the server.
	cat >"$dir/start.sh" <<START
#!/usr/bin/env bash
export INFLUXDB_REPORTING_DISABLED=true
export INFLUXDB_BIND_ADDRESS=127.0.0.1:$rpc
export INFLUXDB_HTTP_BIND_ADDRESS=127.0.0.1:$http
export INFLUXDB_HTTP_FLUX_ENABLED=true
export INFLUXDB_HTTP_AUTH_ENABLED=$auth
export INFLUXDB_HTTP_LOG_ENABLED=false
export INFLUXDB_MONITOR_STORE_ENABLED=false
export INFLUXDB_META_DIR=$dir/meta
export INFLUXDB_DATA_DIR=$dir/data
export INFLUXDB_DATA_WAL_DIR=$dir/wal
export INFLUXDB_DATA_QUERY_LOG_ENABLED=false
"$INFLUXD" run >>"$dir/influxd.log" 2>&1 &
echo \$! >"$dir/pid"
for i in \$(seq 1 300); do
	if curl -fsS "http://127.0.0.1:$http/ping" >/dev/null 2>&1; then exit 0; fi
	kill -0 "\$(cat "$dir/pid")" 2>/dev/null || { echo "influxd exited; see $dir/influxd.log" >&2; exit 1; }
	sleep 0.1
done
echo "influxd did not answer /ping within 30 s; see $dir/influxd.log" >&2
exit 1
START
	chmod +x "$dir/start.sh"

	stop() {
		local pid
		pid="$(cat "$dir/pid" 2>/dev/null || true)"
		if [ -n "$pid" ] && kill -0 "$pid" 2>/dev/null; then
			kill "$pid" 2>/dev/null || true
			for _ in $(seq 1 100); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
			kill -9 "$pid" 2>/dev/null || true
		fi
		if [ -n "${DRAINSIGHT_KEEP_INFLUXD_DIR:-}" ]; then
			say "kept $dir"
		else
			rm -rf "$dir"
		fi
	}
	trap stop EXIT
	trap 'exit 130' INT
	trap 'exit 143' TERM

	"$dir/start.sh" || { cat "$dir/influxd.log" >&2; die "server did not start"; }
	export DRAINSIGHT_INFLUX_URL="http://127.0.0.1:$http"
	export DRAINSIGHT_INFLUX_DB="$DB"
	export DRAINSIGHT_INFLUX_BUCKET="$DB/autogen"
	export DRAINSIGHT_INFLUXD_DIR="$dir"
	export DRAINSIGHT_INFLUXD_PID="$(cat "$dir/pid")"
	export DRAINSIGHT_INFLUXD_START="$dir/start.sh"
	if $auth; then
		# With no users yet, creating the first admin is allowed unauthenticated.
		query "CREATE USER $ADMIN_USER WITH PASSWORD '$ADMIN_PASS' WITH ALL PRIVILEGES"
		query "CREATE DATABASE \"$DB\"" -u "$ADMIN_USER:$ADMIN_PASS"
		export DRAINSIGHT_INFLUX_TOKEN="$ADMIN_USER:$ADMIN_PASS"
	else
		query "CREATE DATABASE \"$DB\""
		export DRAINSIGHT_INFLUX_TOKEN=""
	fi
	say "influxd $VERSION at $DRAINSIGHT_INFLUX_URL (pid $DRAINSIGHT_INFLUXD_PID, auth $auth, bucket $DRAINSIGHT_INFLUX_BUCKET)"

	local rc=0
	"$@" || rc=$?
	exit "$rc"
}

case "${1:-}" in
build) build ;;
run) shift; run "$@" ;;
*)
	sed -n '2,/^set -euo/p' "$0" | sed '$d' | sed 's/^# \{0,1\}//' >&2
	exit 2
	;;
esac
