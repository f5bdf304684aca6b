#!/usr/bin/env bash
# The whole thing live on one machine, nothing to install but Go: an ingest
# worker with its embedded NATS server, the demo shop's four weeks of events
# published in accelerated time (about 20 000 events a second), and live
# numbers on http://127.0.0.1:9464/ (dashboard), /api/… (JSON) and /metrics.
# Ctrl-C stops the worker (it commits before it exits).
set -euo pipefail
cd "$(dirname "$0")/.."
dir=${1:-./tl-live}
port=${TL_NATS_PORT:-4222}
http=${TL_HTTP_ADDR:-127.0.0.1:9464}
mkdir -p "$dir"
go build -o "$dir/ingest" ./cmd/ingest
go build -o "$dir/query" ./cmd/query
go run ./cmd/demo --out "$dir/demo-events.jsonl" --truth "$dir/truth.json"
"$dir/ingest" --config demo/touchledger.yaml --data "$dir/store" --port "$port" --http "$http" --truth "$dir/truth.json" >"$dir/worker.out" 2>"$dir/worker.log" &
worker=$!
trap 'kill -TERM $worker 2>/dev/null; wait $worker 2>/dev/null' EXIT INT TERM
for _ in $(seq 150); do grep -q '^worker:' "$dir/worker.out" 2>/dev/null && break; sleep 0.2; done
cat "$dir/worker.out"
echo "worker running: dashboard http://$http/  ·  JSON http://$http/api/credit?model=linear  ·  metrics http://$http/metrics"
echo "log: $dir/worker.log"
"$dir/ingest" send --nats "nats://127.0.0.1:$port" --rate 20000 "$dir/demo-events.jsonl"
echo
"$dir/query" credit --config demo/touchledger.yaml --nats "nats://127.0.0.1:$port" --model linear --last 7d --chart
echo
"$dir/query" scorecard --config demo/touchledger.yaml --nats "nats://127.0.0.1:$port" --truth "$dir/truth.json" --last 28d
echo
echo "still running; open http://$http/ or ask: $dir/query funnel --nats nats://127.0.0.1:$port --last 7d  (Ctrl-C to stop)"
wait $worker
