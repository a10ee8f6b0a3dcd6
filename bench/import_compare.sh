#!/usr/bin/env bash
# Import benchmark: a 500-tree LightGBM export with 20,000 reference rows.
#
#   bench/import_compare.sh
#
# 1. trains and exports the model and times LightGBM pred_contrib on it (bench/import_models.py,
#    pinned environment of tests/reference/venv.sh) -> ${PLUMBLINE_BENCH_IMPORT:-target/bench-import};
# 2. times `plumbline import` (wall seconds, peak resident memory);
# 3. explains the same 1,000 test rows with the imported artifact (examples/explain_rows.rs).
# Everything is single-threaded.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 PYTHONDONTWRITEBYTECODE=1
d="${PLUMBLINE_BENCH_IMPORT:-target/bench-import}"
"$PLUMBLINE_PY" bench/import_models.py "$d"
cargo build --release --quiet --example explain_rows
cargo build --release --quiet
echo
echo "CPU: $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')"
for i in 1 2 3; do
    r=$( { /usr/bin/time -f "%e %M" target/release/plumbline import "$d/lightgbm500.onnx" --spec "$d/spec.json" \
        --reference "$d/reference.csv" --out "$d/lightgbm500.json"; } 2>&1 | tail -1)
    echo "plumbline import, run $i: ${r% *} s wall, ${r#* } KiB peak RSS"
done
target/release/examples/explain_rows "$d/lightgbm500.json" "$d/rows.json" 5
