#!/usr/bin/env bash
# Interleaved A/B of two release binaries (bench/ab_compare.sh OLD_BINARY NEW_BINARY) on the same machine and model: records off and SQLite,
# flat out (32 clients) and at 2,000 req/s offered, 10 s each, three rounds.
set -u
cd "$(dirname "${BASH_SOURCE[0]}")/.."
old=${1:?old binary}; new=${2:?new binary}
[ -f target/bench-records/request.json ] || { echo "run bench/records_load.sh once first (it writes the models and the request)" >&2; exit 2; }
one() { # bin store label args...
  local bin=$1 store=$2 label=$3; shift 3
  rm -f target/ab.sqlite3*
  if [ "$store" = none ]; then s=(--no-store); else s=(--store sqlite:target/ab.sqlite3); fi
  $bin serve --no-auth --addr 127.0.0.1:18096 --workers 2 --model target/bench-models/boosted500.json "${s[@]}" 2>/dev/null &
  local pid=$!
  for _ in $(seq 1 100); do curl -sf -o /dev/null http://127.0.0.1:18096/health/live && break; sleep 0.1; done
  r=$(hey -z 10s "$@" -m POST -T application/json -D target/bench-records/request.json http://127.0.0.1:18096/v1/decisions)
  printf '%s\t%s\t%s\n' "$label" "$(awk '/Requests\/sec/ {printf "%.0f", $2}' <<<"$r")" "$(awk '/ 99% in/ {printf "%.1f", $3*1000}' <<<"$r")"
  kill $pid; wait $pid 2>/dev/null
}
for round in 1 2 3; do
  for side in old new; do
    bin=$old; [ "$side" = new ] && bin=$new
    one "$bin" none "$side none max" -c 32
    one "$bin" sqlite "$side sqlite max" -c 32
    one "$bin" sqlite "$side sqlite 2000" -c 16 -q 125
  done
done
