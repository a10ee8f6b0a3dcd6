#!/usr/bin/env bash
# Side-by-side explain benchmark: Python libraries vs plumbline, on the same models and rows.
#
#   bench/explain_compare.sh
#
# 1. sets up the pinned Python environment (tests/reference/venv.sh; PLUMBLINE_PYENV picks its place);
# 2. trains and exports the benchmark models and times LightGBM / shap on them
#    (bench/explain_models.py -> ${PLUMBLINE_BENCH_MODELS:-target/bench-models});
# 3. runs the Rust benchmark on the same artifacts and rows (cargo bench --bench explain);
# 4. prints the Python timings again, next to the Rust output.
# Everything is single-threaded.
set -euo pipefail

cd "$(dirname "${BASH_SOURCE[0]}")/.."

# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv

export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 NUMEXPR_NUM_THREADS=1 NUMBA_NUM_THREADS=1
export RAYON_NUM_THREADS=1 PYTHONDONTWRITEBYTECODE=1
unset PYTHONPATH

models="${PLUMBLINE_BENCH_MODELS:-target/bench-models}"
"$PLUMBLINE_PY" bench/explain_models.py "$models"
echo
"$PLUMBLINE_PY" bench/explain_models.py --summary "$models"
echo

PLUMBLINE_BENCH_MODELS="$models" cargo bench --bench explain -- --noplot

# Load time and peak resident memory of the plumbline binary on each model: `inspect` loads,
# validates and compiles the explainer; `score` also decides all 1,000 rows (one thread).
cargo build --release --quiet
"$PLUMBLINE_PY" - "$models" <<'PY'
import json, sys
d = sys.argv[1]
rows = json.load(open(f"{d}/rows.json"))
with open(f"{d}/requests.jsonl", "w") as f:
    for i, r in enumerate(rows):
        f.write(json.dumps({"application_id": f"bench-{i}", "applicant": r}) + "\n")
PY
echo
echo "plumbline binary (wall seconds, peak RSS KiB):"
for m in boosted500 forest100; do
    load=$( { /usr/bin/time -f "%e %M" target/release/plumbline inspect --json "$models/$m.json" >/dev/null; } 2>&1 | tail -1)
    score=$( { /usr/bin/time -f "%e %M" target/release/plumbline score --model "$models/$m.json" "$models/requests.jsonl" >/dev/null; } 2>&1 | tail -1)
    echo "  $m: load+inspect ${load% *} s, ${load#* } KiB; load+decide 1000 rows ${score% *} s, ${score#* } KiB"
done

echo
"$PLUMBLINE_PY" bench/explain_models.py --summary "$models"
echo "(full Python figures: $models/python_timings.json)"
