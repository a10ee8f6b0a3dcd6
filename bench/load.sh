#!/usr/bin/env bash
# Load benchmark: POST /v1/decisions (full contributions) on plumbline, and the same work on the
# peer service a lender would otherwise write (bench/peer: FastAPI + pydantic + LightGBM
# pred_contrib, top-4 reasons), on the same 500-tree model, at fixed request rates and flat out.
# Also plumbline on the 100-tree forest, and on the 500-tree model with durable records (SQLite,
# the default store). Next to requests per second: the server's CPU per answered request, from
# /proc (user + system time of the server process and its children over the step). Load
# generator: hey (Debian), on the same cores. Results: stdout and target/bench-load.md. Loopback
# only; every run is bounded in time (10 s per step).
#
#   bench/load.sh [SECONDS_PER_STEP]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
step="${1:-10}"
models="${PLUMBLINE_BENCH_MODELS:-target/bench-models}"

# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv
if ! "$PLUMBLINE_PY" -c "import fastapi, uvicorn" 2>/dev/null; then
    "$PLUMBLINE_PY" -m pip install --quiet --disable-pip-version-check --only-binary=:all: -r bench/peer/requirements.txt
fi
command -v hey >/dev/null || { apt-get update -qq && apt-get install -y -qq hey; }
[ -f "$models/boosted500.json" ] || "$PLUMBLINE_PY" bench/explain_models.py "$models"
cargo build --release --quiet

"$PLUMBLINE_PY" - "$models" <<'PY'
import json, sys
d = sys.argv[1]
row = json.load(open(f"{d}/rows.json"))[0]
json.dump({"application_id": "bench-1", "applicant": row}, open(f"{d}/load-request.json", "w"))
PY

peak_kib() { # peak RSS of a process and its children, KiB
    local total=0
    for p in "$1" $(pgrep -P "$1" || true); do
        total=$((total + $(awk '/VmHWM/ {print $2}' "/proc/$p/status" 2>/dev/null || echo 0)))
    done
    echo "$total"
}

cpu_ticks() { # user + system clock ticks of a process and its children so far
    local total=0
    for p in "$1" $(pgrep -P "$1" || true); do
        total=$((total + $(awk '{print $14 + $15}' "/proc/$p/stat" 2>/dev/null || echo 0)))
    done
    echo "$total"
}
hz=$(getconf CLK_TCK)

wait_up() {
    for _ in $(seq 1 100); do curl -sf -o /dev/null "$1" && return 0; sleep 0.1; done
    echo "server at $1 did not come up" >&2; return 1
}

out=target/bench-load.md
echo "| service | model | offered rate (req/s) | achieved (req/s) | p50 ms | p99 ms | non-200 | server CPU µs per request | peak RSS MiB |" >"$out"
echo "|---|---|---|---|---|---|---|---|---|" >>"$out"

run_rates() { # name model url pid
    local name=$1 model=$2 url=$3 pid=$4
    for rate in 250 500 1000 2000 max; do
        # hey paces each client separately (q per client); more clients than needed only
        # makes bursts, so use about one client per 125 req/s.
        if [ "$rate" = max ]; then
            args=(-c 32)
        else
            c=$(( (rate + 124) / 125 )); args=(-c "$c" -q $((rate / c)))
        fi
        before=$(cpu_ticks "$pid")
        res=$(hey -z "${step}s" "${args[@]}" -m POST -T application/json -D "$models/load-request.json" "$url")
        after=$(cpu_ticks "$pid")
        answered=$(awk '/\[[0-9]+\]/ {n += $2} END {print n + 0}' <<<"$res")
        cpu=$(awk -v t=$((after - before)) -v hz="$hz" -v n="$answered" 'BEGIN {if (n > 0) printf "%.0f", t / hz * 1e6 / n; else print "-"}')
        rps=$(awk '/Requests\/sec/ {printf "%.0f", $2}' <<<"$res")
        p50=$(awk '/ 50% in/ {printf "%.2f", $3 * 1000}' <<<"$res")
        p99=$(awk '/ 99% in/ {printf "%.2f", $3 * 1000}' <<<"$res")
        bad=$(awk '/\[[0-9]+\]/ {gsub(/[\[\]]/, "", $1); if ($1 != 200) n += $2} END {print n + 0}' <<<"$res")
        mem=$(( $(peak_kib "$pid") / 1024 ))
        echo "| $name | $model | $rate | $rps | $p50 | $p99 | $bad | $cpu | $mem |" | tee -a "$out"
    done
}

for model in boosted500 forest100; do
    # Records off: this compares compute with the peer, which records nothing either;
    # bench/records_load.sh measures the cost of durable records.
    target/release/plumbline serve --no-auth --no-store --addr 127.0.0.1:18080 --workers 2 --model "$models/$model.json" 2>/dev/null &
    pid=$!
    wait_up http://127.0.0.1:18080/health/ready
    run_rates plumbline "$model" http://127.0.0.1:18080/v1/decisions "$pid"
    kill -TERM "$pid"; wait "$pid" || true
done

# Durable records, as a lender runs it: every decision committed to the default SQLite store
# (WAL, synchronous=FULL) before it is answered.
store=$(mktemp -d)
target/release/plumbline serve --no-auth --store "sqlite:$store/records.sqlite3" --addr 127.0.0.1:18080 --workers 2 --model "$models/boosted500.json" 2>/dev/null &
pid=$!
wait_up http://127.0.0.1:18080/health/ready
run_rates plumbline-durable-sqlite boosted500 http://127.0.0.1:18080/v1/decisions "$pid"
kill -TERM "$pid"; wait "$pid" || true
rm -rf "$store"

# One uvicorn worker: with --workers 2 this peer answered in 48 ms per request at any load on this
# machine (41 req/s), with one worker in 4-5 ms (about 450 req/s); we give the peer its best.
PEER_MODEL="$models/boosted500.lgb.txt" OMP_NUM_THREADS=1 "$PLUMBLINE_PY" -m uvicorn bench.peer.app:app \
    --host 127.0.0.1 --port 18081 --workers 1 --log-level warning &
pid=$!
wait_up http://127.0.0.1:18081/docs
run_rates peer-fastapi-lightgbm boosted500 http://127.0.0.1:18081/decide "$pid"
kill -TERM "$pid"; wait "$pid" || true

echo "(written to $out)"
