#!/usr/bin/env bash
# Side-by-side training and evaluation throughput: plumbline vs scikit-learn, same generated data.
#
#   bench/train_compare.sh                 100,000 and 1,000,000 rows (15-20 minutes on 2 cores)
#   PLUMBLINE_BENCH_ROWS="20000 50000" ...  other sizes (a quick check takes about a minute)
#   PLUMBLINE_BENCH_FOLDS=5 ...             cross-validation folds on both sides (default 2)
#
# For each size N: `plumbline demo-data` writes N training rows (seed 1) and N held-out rows
# (seed 2); then, each process under /usr/bin/time -v (wall time, peak RSS), one after another:
#   train logistic    plumbline train --spec models/fernhill-logistic.train.json --folds K
#                     vs bench/train_sklearn.py train (LogisticRegression, unpenalised, Newton)
#   train forest      the same with models/fernhill-forest.train.json (100 trees, max_depth 8,
#                     min_samples_leaf 20) vs RandomForestClassifier with those settings
#   evaluate ...      plumbline evaluate --json on the held-out rows with each trained artifact
#                     vs bench/train_sklearn.py evaluate with each pickled model
# Training is the same work on both sides: read and encode the CSV, one final fit on all rows,
# stratified K-fold cross-validated AUC, write the model. The sklearn side takes its encoding
# (imputed values, dummies without the base level) and settings from the same training specs.
# Python's time is measured inside the process after the imports; its whole-process time and a
# bare start-up run are reported beside it. Everything is single-threaded.
#
# Output: the table on stdout and in target/bench-train/results.md; models, data and each run's
# output stay in target/bench-train/.
set -euo pipefail

cd "$(dirname "${BASH_SOURCE[0]}")/.."

# shellcheck source=../tests/reference/venv.sh
. tests/reference/venv.sh
plumbline_venv

export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 NUMEXPR_NUM_THREADS=1
export RAYON_NUM_THREADS=1 PYTHONDONTWRITEBYTECODE=1
unset PYTHONPATH

out=target/bench-train
mkdir -p "$out"
cargo build --release --locked --quiet
# A copy, so that a rebuild of target/release during the run cannot change the binary under test.
cp target/release/plumbline "$out/plumbline"
plumbline="$out/plumbline"
sizes="${PLUMBLINE_BENCH_ROWS:-100000 1000000}"
folds="${PLUMBLINE_BENCH_FOLDS:-2}"
fit_seed=2026
measurements="$out/measurements.jsonl"

# measure SIDE TASK ROWS NAME MODEL COMMAND...: runs COMMAND under /usr/bin/time -v, its stdout to
# $out/NAME.out and stderr to $out/NAME.err, and appends one JSON line to $measurements (MODEL is
# the model file the run writes or reads, for the report; load is the 1-minute load average after
# the run: above 1 on this single-threaded benchmark means something else competed for the CPU).
measure() {
    local side=$1 task=$2 rows=$3 name=$4 model=$5
    shift 5
    echo "  $side $task ($rows rows)" >&2
    if ! /usr/bin/time -v -o "$out/$name.time" "$@" >"$out/$name.out" 2>"$out/$name.err"; then
        cat "$out/$name.err" "$out/$name.time" >&2
        return 1
    fi
    local wall rss
    # "Elapsed (wall clock) time (h:mm:ss or m:ss): 1:02.35" -> seconds
    wall=$(awk -F': ' '/Elapsed \(wall clock\)/ { n = split($2, t, ":"); s = 0;
                                                 for (i = 1; i <= n; i++) s = s * 60 + t[i]; print s }' "$out/$name.time")
    rss=$(awk -F': ' '/Maximum resident set size/ { print $2 }' "$out/$name.time")
    printf '{"side": "%s", "task": "%s", "rows": %s, "wall_s": %s, "maxrss_kib": %s, "load": %s, "stdout": "%s", "model": "%s"}\n' \
        "$side" "$task" "$rows" "$wall" "$rss" "$(cut -d' ' -f1 /proc/loadavg)" "$out/$name.out" "$model" >>"$measurements"
}

printf '{"when": "%s", "cpu": "%s", "cores": %s, "plumbline": "%s", "folds": %s}\n' \
    "$(date -u +%Y-%m-%d)" "$(lscpu | sed -n 's/^Model name: *//p' | head -1)" "$(getconf _NPROCESSORS_ONLN)" \
    "$("$plumbline" --version | cut -d' ' -f2)" "$folds" >"$measurements"
measure sklearn startup 0 sklearn-startup "" "$PLUMBLINE_PY" bench/train_sklearn.py startup

for n in $sizes; do
    echo "$n rows" >&2
    "$plumbline" demo-data --rows "$n" --seed 1 --out "$out/train-$n.csv" >/dev/null
    "$plumbline" demo-data --rows "$n" --seed 2 --out "$out/holdout-$n.csv" >/dev/null
    for kind in logistic forest; do
        spec="models/fernhill-$kind.train.json"
        measure plumbline "train $kind" "$n" "plumbline-train-$kind-$n" "$out/plumbline-$kind-$n.json" \
            "$plumbline" train --data "$out/train-$n.csv" --spec "$spec" --out "$out/plumbline-$kind-$n.json" \
            --folds "$folds" --seed "$fit_seed"
        measure sklearn "train $kind" "$n" "sklearn-train-$kind-$n" "$out/sklearn-$kind-$n.pkl" \
            "$PLUMBLINE_PY" bench/train_sklearn.py train --data "$out/train-$n.csv" --spec "$spec" \
            --out "$out/sklearn-$kind-$n.pkl" --folds "$folds" --seed "$fit_seed"
    done
    for kind in logistic forest; do
        spec="models/fernhill-$kind.train.json"
        measure plumbline "evaluate $kind" "$n" "plumbline-evaluate-$kind-$n" "$out/plumbline-$kind-$n.json" \
            "$plumbline" evaluate --model "$out/plumbline-$kind-$n.json" --data "$out/holdout-$n.csv" --json
        measure sklearn "evaluate $kind" "$n" "sklearn-evaluate-$kind-$n" "$out/sklearn-$kind-$n.pkl" \
            "$PLUMBLINE_PY" bench/train_sklearn.py evaluate --model "$out/sklearn-$kind-$n.pkl" \
            --data "$out/holdout-$n.csv" --spec "$spec"
    done
done

echo
"$PLUMBLINE_PY" bench/train_sklearn.py report "$measurements" "$out/results.md"
echo "(markdown: $out/results.md)"
