#!/usr/bin/env bash
# Regenerate the TreeSHAP reference fixtures and compare them with the committed ones.
#
#   tests/reference/regen.sh           exit 0 if a fresh generation is byte-identical to
#                                      tests/reference/fixtures/, else print the diff and exit 1
#   tests/reference/regen.sh --write   overwrite tests/reference/fixtures/ with a fresh generation
#
# Sets up the pinned Python environment first (see venv.sh; PLUMBLINE_PYENV picks its place).
set -euo pipefail

cd "$(dirname "${BASH_SOURCE[0]}")/../.."

write=0
case "${1:-}" in
    "") ;;
    --write) write=1 ;;
    *) echo "usage: tests/reference/regen.sh [--write]" >&2; exit 2 ;;
esac

# shellcheck source=tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv

# single-threaded, and no stray configuration from the caller's environment
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 NUMEXPR_NUM_THREADS=1 NUMBA_NUM_THREADS=1
export PYTHONHASHSEED=0 PYTHONDONTWRITEBYTECODE=1
unset PYTHONPATH

out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
"$PLUMBLINE_PY" tests/reference/make_fixtures.py "$out"
"$PLUMBLINE_PY" tests/reference/make_metrics.py "$out"
"$PLUMBLINE_PY" tests/reference/make_fairness.py "$out"
"$PLUMBLINE_PY" tests/reference/make_backtest.py "$out"
"$PLUMBLINE_PY" tests/reference/make_onnx.py "$out"

fixtures=tests/reference/fixtures
if [ "$write" = 1 ]; then
    mkdir -p "$fixtures"
    for f in lightgbm.json forest.json expected.json metrics.json fairness.json backtest.json; do
        cp "$out/$f" "$fixtures/$f"
    done
    rm -rf "$fixtures/onnx"
    cp -r "$out/onnx" "$fixtures/onnx"
    echo "regen: wrote $fixtures/{lightgbm,forest,expected,metrics,fairness,backtest}.json and $fixtures/onnx/"
    exit 0
fi

if diff -ru "$fixtures" "$out"; then
    echo "regen: fixtures are up to date ($fixtures)"
else
    echo "regen: FAILED: a fresh generation differs from $fixtures (diff above); run tests/reference/regen.sh --write if the change is intended" >&2
    exit 1
fi
