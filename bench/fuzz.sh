#!/usr/bin/env bash
# The longer fuzzing run: the proptest fuzzers of tests/pipeline/properties/fuzz.rs with many more cases
# than the test suite's bounded run. A failure prints proptest's minimal case; fix it and keep it
# as a named regression test beside the fuzzer. Usage: bench/fuzz.sh [CASES] (default 20000).
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
FUZZ_CASES="${1:-20000}" cargo test --locked --test pipeline properties::fuzz:: -- --test-threads 2
