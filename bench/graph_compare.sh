#!/usr/bin/env bash
# Graph-model benchmark: exact interventional Shapley values of a neural network and an RBF
# support-vector machine, plumbline beside shap's Exact explainer, in one run.
#
#   bench/graph_compare.sh
#
# 1. trains and exports the models and times shap (bench/graph_models.py, pinned environment of
#    tests/reference/venv.sh) -> ${PLUMBLINE_BENCH_GRAPH:-target/bench-graph};
# 2. imports each with the same 100 background rows and explains the same test rows
#    (examples/explain_rows.rs), one thread.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 PYTHONDONTWRITEBYTECODE=1
d="${PLUMBLINE_BENCH_GRAPH:-target/bench-graph}"
"$PLUMBLINE_PY" bench/graph_models.py "$d" >/dev/null
cargo build --release --quiet --example explain_rows
cargo build --release --quiet
echo "CPU: $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')"
for m in mlp svm; do
    target/release/plumbline import "$d/$m.onnx" --spec "$d/spec.json" --reference "$d/reference.csv" \
        --background "$d/background.csv" --out "$d/$m.json" 2>/dev/null
    target/release/plumbline inspect "$d/$m.json" | grep -E "operators|support vectors|model evaluations"
    echo -n "$m, plumbline: "
    target/release/examples/explain_rows "$d/$m.json" "$d/rows.json" 3
done
"$PLUMBLINE_PY" - "$d" <<'PY'
import json, sys
r = json.load(open(f"{sys.argv[1]}/python.json"))
for m in ("mlp", "svm"):
    extra = f", {r[m]['support_vectors']} support vectors" if "support_vectors" in r[m] else ""
    print(f"{m}, shap {r['versions']['shap']} Exact: {r[m]['shap_exact_ms_per_row'] * 1000:.1f} us per row{extra}")
PY
