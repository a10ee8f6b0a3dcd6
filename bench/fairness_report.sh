#!/usr/bin/env bash
# The fair-lending report over 1,000,000 stored decisions with probabilistic membership over 5
# groups, on each store: the time of POST /v1/fairness/reports (upload included) and the
# service's peak RSS before and after. The store is filled by examples/fill_records.rs with
# invented demo decisions. Results: stdout and target/bench-fairness.md.
#
#   bench/fairness_report.sh [ROWS]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
rows="${1:-1000000}"
work=target/bench-fairness
pg="${PLUMBLINE_BENCH_POSTGRES:-postgres://postgres@127.0.0.1:5432}"
model=models/fernhill-logistic-trained.json
cargo build --release --quiet --bins --example fill_records
rm -rf "$work" && mkdir -p "$work"
trap 'kill "${pid:-0}" 2>/dev/null || true' EXIT

wait_up() {
    for _ in $(seq 1 100); do curl -sf -o /dev/null "$1" && return 0; sleep 0.1; done
    echo "server at $1 did not come up" >&2; return 1
}

out=target/bench-fairness.md
echo "| store | decisions | fill s | report s | response bytes | service peak RSS MiB before / after |" >"$out"
echo "|---|---:|---:|---:|---:|---|" >>"$out"
for store in sqlite postgres; do
    case $store in
        sqlite) location="sqlite:$work/records.sqlite3" ;;
        postgres)
            psql "$pg/postgres" -qc "DROP DATABASE IF EXISTS plumbline_fairness WITH (FORCE)" -c "CREATE DATABASE plumbline_fairness"
            location="$pg/plumbline_fairness" ;;
    esac
    start=$(date +%s.%N)
    target/release/examples/fill_records "$location" "$rows" "$model" "$work/groups.csv"
    fill=$(echo "$(date +%s.%N) - $start" | bc)
    python3 - "$work/groups.csv" "$work/request.json" <<'PY'
import json, sys
json.dump({"groups_csv": open(sys.argv[1]).read(), "dimension": "synthetic_group"}, open(sys.argv[2], "w"))
PY
    target/release/plumbline serve --no-auth --addr 127.0.0.1:18095 --workers 2 --model "$model" \
        --store "$location" 2>/dev/null &
    pid=$!
    wait_up http://127.0.0.1:18095/health/ready
    before=$(awk '/VmHWM/ {print $2}' "/proc/$pid/status")
    start=$(date +%s.%N)
    curl -sf -H 'Content-Type: application/json' --data-binary "@$work/request.json" \
        -o "$work/report-$store.json" http://127.0.0.1:18095/v1/fairness/reports
    secs=$(echo "$(date +%s.%N) - $start" | bc)
    after=$(awk '/VmHWM/ {print $2}' "/proc/$pid/status")
    kill -TERM "$pid"; wait "$pid" || true
    echo "| $store | $rows | ${fill%??????} | ${secs%??????} | $(wc -c <"$work/report-$store.json") | $((before / 1024)) / $((after / 1024)) |" | tee -a "$out"
done
echo "upload: $(du -m "$work/request.json" | cut -f1) MiB of CSV in JSON; (written to $out)"
