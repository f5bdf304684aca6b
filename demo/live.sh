#!/usr/bin/env bash
# The whole thing live on one machine, nothing to install but Go: an ingest
# worker with its embedded NATS server, the demo shop's four weeks of events
# published in accelerated time (about 20 000 events a second), and live
# numbers on http://127.0.0.1:9464/ (dashboard), /api/… (JSON) and /metrics.
# Ctrl-C stops the worker (it commits before it exits).
#
# It stops with a message (exit 1) when a port is taken or the worker fails,
# prints numbers only once the worker has committed every event it was
# sent, and a second run on the same directory resumes the first instead of
# publishing the events again (remove the directory to start over).
set -euo pipefail
cd "$(dirname "$0")/.."
dir=${1:-./tl-live}
port=${TL_NATS_PORT:-4222}
http=${TL_HTTP_ADDR:-127.0.0.1:9464}
nats="nats://127.0.0.1:$port"

die() { echo "live.sh: $*" >&2; exit 1; }

# taken HOST PORT: something accepts connections there.
taken() { (exec 3<>"/dev/tcp/$1/$2") 2>/dev/null; }

taken 127.0.0.1 "$port" && die "port $port (NATS) is taken by another program: stop it or set TL_NATS_PORT"
taken "${http%:*}" "${http##*:}" && die "$http (HTTP) is taken by another program: stop it or set TL_HTTP_ADDR"

mkdir -p "$dir"
go build -o "$dir/ingest" ./cmd/ingest
go build -o "$dir/query" ./cmd/query
rerun=false
if [ -d "$dir/store" ]; then
	rerun=true
	echo "$dir holds an earlier run: resuming it, the events are not published again (remove $dir to start over)"
fi
[ -f "$dir/demo-events.jsonl" ] || go run ./cmd/demo --out "$dir/demo-events.jsonl" --truth "$dir/truth.json"
"$dir/ingest" --config demo/touchledger.yaml --data "$dir/store" --port "$port" --http "$http" --truth "$dir/truth.json" >"$dir/worker.out" 2>"$dir/worker.log" &
worker=$!
trap 'kill -TERM $worker 2>/dev/null; wait $worker 2>/dev/null' EXIT INT TERM

# Wait for the worker's address line; if it exits first, show why.
for _ in $(seq 300); do
	grep -q '^worker:' "$dir/worker.out" 2>/dev/null && break
	if ! kill -0 "$worker" 2>/dev/null; then
		cat "$dir/worker.log" >&2
		die "the worker stopped before it was ready (its log is above and in $dir/worker.log)"
	fi
	sleep 0.2
done
grep -q '^worker:' "$dir/worker.out" || die "the worker did not report ready within 60 s (see $dir/worker.log)"
cat "$dir/worker.out"
echo "worker running: dashboard http://$http/  ·  JSON http://$http/api/credit?model=linear  ·  metrics http://$http/metrics"
echo "log: $dir/worker.log"

# metric NAME: the sum of a metric's samples on the worker's /metrics.
metric() {
	local host=${http%:*} p=${http##*:}
	exec 3<>"/dev/tcp/$host/$p" || return 1
	printf 'GET /metrics HTTP/1.0\r\nHost: %s\r\n\r\n' "$http" >&3
	awk -v name="$1" '$1 == name || index($1, name "{") == 1 { s += $2 } END { printf "%d\n", s }' <&3
	exec 3<&-
}

if ! $rerun; then
	"$dir/ingest" send --nats "$nats" --rate 20000 "$dir/demo-events.jsonl"
fi
sent=$(wc -l <"$dir/demo-events.jsonl")
echo "waiting until the worker has committed all $sent events …"
for i in $(seq 600); do
	kill -0 "$worker" 2>/dev/null || { cat "$dir/worker.log" >&2; die "the worker stopped (its log is above)"; }
	done_=$(metric touchledger_events_total || echo 0)
	buffered=$(metric touchledger_buffered_events || echo 1)
	# Buffered events are committed with the state; they count once event
	# time passes them by the allowed lateness.
	[ $((done_ + buffered)) -ge "$sent" ] && break
	[ "$i" -eq 600 ] && die "after 120 s the worker has committed $((done_ + buffered)) of $sent events; see $dir/worker.log"
	sleep 0.2
done
echo "committed all $sent events: $done_ counted, $buffered held by the allowed lateness until event time passes them"
echo
"$dir/query" credit --nats "$nats" --model linear --last 7d --chart
echo
"$dir/query" scorecard --nats "$nats" --truth "$dir/truth.json" --last 28d
echo
"$dir/query" alerts --nats "$nats" --last 28d
echo
echo "still running; open http://$http/ or ask: $dir/query funnel --nats $nats --last 7d  (Ctrl-C to stop)"
wait $worker
