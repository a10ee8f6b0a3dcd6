#!/usr/bin/env bash
# Durable recording under load: POST /v1/decisions on the same 500-tree model as bench/load.sh,
# with records off (--no-store), on the embedded SQLite store (WAL, synchronous=FULL, group
# commit) and on PostgreSQL (127.0.0.1:5432, a fresh database). Same offered rates as the service
# benchmark, plus flat out. Load generator: hey. Results: stdout and target/bench-records.md.
#
#   bench/records_load.sh [SECONDS_PER_STEP]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
step="${1:-10}"
models="${PLUMBLINE_BENCH_MODELS:-target/bench-models}"
work=target/bench-records
pg="${PLUMBLINE_BENCH_POSTGRES:-postgres://postgres@127.0.0.1:5432}"

command -v hey >/dev/null || { apt-get update -qq && apt-get install -y -qq hey; }
if [ ! -f "$models/boosted500.json" ]; then
    # shellcheck source=../tests/reference/venv.sh
    . tests/reference/venv.sh
    plumbline_venv
    "$PLUMBLINE_PY" bench/explain_models.py "$models"
fi
cargo build --release --quiet
rm -rf "$work" && mkdir -p "$work"
python3 - "$models" "$work" <<'PY'
import json, sys
row = json.load(open(f"{sys.argv[1]}/rows.json"))[0]
json.dump({"application_id": "bench-1", "applicant": row}, open(f"{sys.argv[2]}/request.json", "w"))
PY

wait_up() {
    for _ in $(seq 1 100); do curl -sf -o /dev/null "$1" && return 0; sleep 0.1; done
    echo "server at $1 did not come up" >&2; return 1
}

out=target/bench-records.md
echo "| store | offered rate (req/s) | achieved (req/s) | p50 ms | p99 ms | non-200 | peak RSS MiB |" >"$out"
echo "|---|---|---|---|---|---|---|" >>"$out"

for store in none sqlite postgres; do
    case $store in
        none) args=(--no-store) ;;
        sqlite) args=(--store "sqlite:$work/records.sqlite3") ;;
        postgres)
            psql "$pg/postgres" -qc "DROP DATABASE IF EXISTS plumbline_bench WITH (FORCE)" -c "CREATE DATABASE plumbline_bench"
            args=(--store "$pg/plumbline_bench") ;;
    esac
    target/release/plumbline serve --no-auth --addr 127.0.0.1:18090 --workers 2 \
        --model "$models/boosted500.json" "${args[@]}" 2>/dev/null &
    pid=$!
    wait_up http://127.0.0.1:18090/health/ready
    for rate in 250 1000 2000 max; do
        if [ "$rate" = max ]; then
            hargs=(-c 32)
        else
            c=$(( (rate + 124) / 125 )); hargs=(-c "$c" -q $((rate / c)))
        fi
        res=$(hey -z "${step}s" "${hargs[@]}" -m POST -T application/json -D "$work/request.json" http://127.0.0.1:18090/v1/decisions)
        rps=$(awk '/Requests\/sec/ {printf "%.0f", $2}' <<<"$res")
        p50=$(awk '/ 50% in/ {printf "%.2f", $3 * 1000}' <<<"$res")
        p99=$(awk '/ 99% in/ {printf "%.2f", $3 * 1000}' <<<"$res")
        bad=$(awk '/\[[0-9]+\]/ {gsub(/[\[\]]/, "", $1); if ($1 != 200) n += $2} END {print n + 0}' <<<"$res")
        mem=$(( $(awk '/VmHWM/ {print $2}' "/proc/$pid/status") / 1024 ))
        echo "| $store | $rate | $rps | $p50 | $p99 | $bad | $mem |" | tee -a "$out"
    done
    kill -TERM "$pid"; wait "$pid" || true
done

# Export of everything recorded on SQLite (every decision above), streamed: by the command line,
# and by the service (its peak RSS before and after). Peak memory must not grow with the range.
/usr/bin/time -v target/release/plumbline records export --store "sqlite:$work/records.sqlite3" \
    >"$work/export.jsonl" 2>"$work/export.time"
echo
echo "CLI export: $(wc -l <"$work/export.jsonl") records, $(du -m "$work/export.jsonl" | cut -f1) MiB of JSON lines in" \
    "$(awk -F': ' '/Elapsed/ {print $2}' "$work/export.time"), peak RSS" \
    "$(awk '/Maximum resident/ {printf "%.0f", $6 / 1024}' "$work/export.time") MiB" | tee -a "$out"
target/release/plumbline serve --no-auth --addr 127.0.0.1:18090 --workers 2 \
    --model "$models/boosted500.json" --store "sqlite:$work/records.sqlite3" 2>/dev/null &
pid=$!
wait_up http://127.0.0.1:18090/health/ready
before=$(awk '/VmHWM/ {print $2}' "/proc/$pid/status")
start=$(date +%s.%N)
curl -sf -o /dev/null "http://127.0.0.1:18090/v1/decisions/export?format=jsonl"
secs=$(echo "$(date +%s.%N) - $start" | bc)
after=$(awk '/VmHWM/ {print $2}' "/proc/$pid/status")
echo "service export: the same records in ${secs%????} s; service peak RSS $((before / 1024)) MiB before, $((after / 1024)) MiB after" | tee -a "$out"
kill -TERM "$pid"; wait "$pid" || true
echo "(written to $out)"
