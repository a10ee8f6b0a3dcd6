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

echo
"$PLUMBLINE_PY" bench/explain_models.py --summary "$models"
echo "(full Python figures: $models/python_timings.json)"
