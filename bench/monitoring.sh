#!/usr/bin/env bash
# Monitoring at scale, on each store: 1,000,000 recorded decisions (invented demo applications
# decided by the trained demo model over 18 months, examples/fill_records.rs) and an outcome for
# every one of them. Times, through the running service: POST /v1/outcomes (the whole file),
# GET /v1/monitoring/stability and GET /v1/monitoring/outcomes over the whole range; and the
# service's peak RSS after each. Results: stdout and target/bench-monitoring.md.
#
#   bench/monitoring.sh [ROWS]        (PLUMBLINE_BENCH_STORES="postgres" for one store)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
rows="${1:-1000000}"
work=target/bench-monitoring
pg="${PLUMBLINE_BENCH_POSTGRES:-postgres://postgres@127.0.0.1:5432}"
model=models/fernhill-logistic-trained.json
id=fernhill-personal-logistic
cargo build --release --quiet --bins --example fill_records
rm -rf "$work" && mkdir -p "$work"
trap 'kill "${pid:-0}" 2>/dev/null || true' EXIT

wait_up() {
    for _ in $(seq 1 100); do curl -sf -o /dev/null "$1" && return 0; sleep 0.1; done
    echo "server at $1 did not come up" >&2; return 1
}
since() { echo "$(date +%s.%N) - $1" | bc | sed 's/\(\.[0-9]\)[0-9]*/\1/'; }
peak() { echo $(( $(awk '/VmHWM/ {print $2}' "/proc/$pid/status") / 1024 )); }

out=target/bench-monitoring.md
echo "| store | decisions | outcomes | fill s | load outcomes s (peak MiB) | stability s (peak MiB) | back-test s (peak MiB) |" >"$out"
echo "|---|---:|---:|---:|---:|---:|---:|" >>"$out"
for store in ${PLUMBLINE_BENCH_STORES:-sqlite postgres}; do
    case $store in
        sqlite) location="sqlite:$work/records.sqlite3" ;;
        postgres)
            psql "$pg/postgres" -qc "DROP DATABASE IF EXISTS plumbline_monitoring WITH (FORCE)" -c "CREATE DATABASE plumbline_monitoring"
            location="$pg/plumbline_monitoring" ;;
    esac
    start=$(date +%s.%N)
    target/release/examples/fill_records "$location" "$rows" "$model" "$work/groups.csv" "$work/outcomes.csv" every
    fill=$(since "$start")
    target/release/plumbline serve --no-auth --addr 127.0.0.1:18096 --workers 2 --model "$model" \
        --store "$location" 2>/dev/null &
    pid=$!
    wait_up http://127.0.0.1:18096/health/ready
    start=$(date +%s.%N)
    curl -sf -H 'Content-Type: text/csv' --data-binary "@$work/outcomes.csv" \
        -o "$work/load-$store.json" http://127.0.0.1:18096/v1/outcomes
    load="$(since "$start") ($(peak))"
    stored=$(python3 -c "import json,sys; print(json.load(open(sys.argv[1]))['stored'])" "$work/load-$store.json")
    start=$(date +%s.%N)
    curl -sf -o "$work/stability-$store.json" "http://127.0.0.1:18096/v1/monitoring/stability?model_id=$id"
    stability="$(since "$start") ($(peak))"
    start=$(date +%s.%N)
    curl -sf -o "$work/backtest-$store.json" "http://127.0.0.1:18096/v1/monitoring/outcomes?model_id=$id"
    backtest="$(since "$start") ($(peak))"
    kill -TERM "$pid"; wait "$pid" || true
    echo "| $store | $rows | $stored | $fill | $load | $stability | $backtest |" | tee -a "$out"
done
echo "outcomes file: $(du -m "$work/outcomes.csv" | cut -f1) MiB (written to $out)"
