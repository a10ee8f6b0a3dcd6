#!/usr/bin/env bash
# Interleaved explain benchmark: LightGBM pred_contrib / shap TreeExplainer and plumbline on the
# same models and rows, one after the other, round after round, so that the ratio of each round
# compares both sides on the machine as it was in that minute (a shared VM's speed drifts by
# tens of percent over minutes). Needs the models of bench/explain_compare.sh (run it once).
#
#   bench/explain_rounds.sh [ROUNDS]
#
# Per round and model: the Python library's batch time per row (1,000 rows, best of three),
# then plumbline one row per call and 1,000 rows together (examples/explain_rows), one thread.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
rounds="${1:-5}"
models="${PLUMBLINE_BENCH_MODELS:-target/bench-models}"
# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 NUMEXPR_NUM_THREADS=1 NUMBA_NUM_THREADS=1
export PYTHONDONTWRITEBYTECODE=1
[ -f "$models/boosted500.json" ] || "$PLUMBLINE_PY" bench/explain_models.py "$models"
cargo build --release --quiet --example explain_rows
ours=target/release/examples/explain_rows
out=target/bench-explain-rounds.md
{
    echo "| round | model | library µs/row (batch) | plumbline µs/row, one per call | plumbline µs/row, 1,000 together | ratio, one per call | ratio, together |"
    echo "|---:|---|---:|---:|---:|---:|---:|"
} >"$out"
for round in $(seq 1 "$rounds"); do
    for m in boosted500 forest100; do
        lib=$("$PLUMBLINE_PY" bench/explain_models.py --measure "$m" time "$models" \
            | "$PLUMBLINE_PY" -c 'import json,sys; print("%.1f" % json.load(sys.stdin)["batch_per_row_us_min"])')
        one=$("$ours" "$models/$m.json" "$models/rows.json" 3 | awk '{print $5}')
        many=$("$ours" "$models/$m.json" "$models/rows.json" 3 rows | awk '{print $5}')
        awk -v r="$round" -v m="$m" -v l="$lib" -v o="$one" -v n="$many" \
            'BEGIN {printf "| %d | %s | %.1f | %.1f | %.1f | %.1fx | %.1fx |\n", r, m, l, o, n, l / o, l / n}' | tee -a "$out"
    done
done
echo "(written to $out)"
