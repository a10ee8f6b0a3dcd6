#!/usr/bin/env bash
# Rebuilds the trained demo models from generated data, deterministically:
#   models/fernhill-logistic-trained.json   logistic, near-cutoff reference (Regulation B 9(b)(2)-5)
#   models/fernhill-forest.json             100-tree random forest, path-dependent TreeSHAP
# tests/pipeline/demo_models.rs rebuilds them the same way and fails if a byte differs.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
mkdir -p target/demo
cargo run --release --quiet -- demo-data --rows 20000 --seed 2026 --out target/demo/fernhill-train.csv
cargo run --release --quiet -- train --data target/demo/fernhill-train.csv --spec models/fernhill-logistic.train.json --folds 5 --seed 2026 --out models/fernhill-logistic-trained.json
cargo run --release --quiet -- train --data target/demo/fernhill-train.csv --spec models/fernhill-forest.train.json --folds 5 --seed 2026 --out models/fernhill-forest.json
