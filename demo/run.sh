#!/usr/bin/env bash
# Quick start: generate the invented shop's events, replay them into a fresh
# data directory and show channel credit. Needs only Go; no server.
set -euo pipefail
cd "$(dirname "$0")/.."
dir=${1:-./tl-data}
mkdir -p "$dir"
cfg=demo/touchledger.yaml
go run ./cmd/demo --out "$dir/demo-events.jsonl" --truth "$dir/truth.json"
go run ./cmd/ingest --config "$cfg" --data "$dir/store" --replay "$dir/demo-events.jsonl" --rejects "$dir/rejects.jsonl"
echo
go run ./cmd/query credit --config "$cfg" --data "$dir/store" --model linear --last 28d --chart
echo
go run ./cmd/query credit --config "$cfg" --data "$dir/store" --model position-based --last 7d
echo
go run ./cmd/query shift --config "$cfg" --data "$dir/store" --model linear --days 7
echo
go run ./cmd/query alerts --config "$cfg" --data "$dir/store" --last 14d
echo
go run ./cmd/query scorecard --config "$cfg" --data "$dir/store" --truth "$dir/truth.json" --last 28d
