#!/usr/bin/env bash
# The OpenAPI document against the running service, with schemathesis (pinned, from PyPI): every
# check, every phase (examples, coverage, fuzzing, stateful through the document's links), all
# roles in one run (schemathesis.toml gives each operation its role's demo key). Zero failures
# or the check fails.
#
# Usage: tests/contract/schema.sh [BINARY] [EXAMPLES]   (defaults target/debug/plumbline, 50)
set -euo pipefail
from_caller() { if [[ $1 = /* ]]; then echo "$1"; else echo "$PWD/$1"; fi; }
BINARY=$(from_caller "${1:-target/debug/plumbline}")
EXAMPLES=${2:-50}
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
SCHEMATHESIS_VERSION=4.32.5
VENV=target/schemathesis-venv
PY=$VENV/bin/python

fail() { echo "schemathesis check: FAIL: $*" >&2; exit 1; }
[[ -x $BINARY ]] || fail "no executable $BINARY (build it first)"
[[ -x $PY ]] || python3 -m venv "$VENV"
if [[ $("$PY" -c 'import importlib.metadata as m; print(m.version("schemathesis"))' 2>/dev/null) != "$SCHEMATHESIS_VERSION" ]]; then
  "$PY" -m pip install --quiet --disable-pip-version-check "schemathesis==$SCHEMATHESIS_VERSION"
fi

# A fresh service on a free port with a fresh store; stopped whatever happens.
TMP=$(mktemp -d)
LOG=$TMP/server.log
"$BINARY" serve --keys models/demo-keys.json --addr 127.0.0.1:0 --store "sqlite:$TMP/records.sqlite3" 2>"$LOG" &
SERVER=$!
trap 'kill "$SERVER" 2>/dev/null || true; wait "$SERVER" 2>/dev/null || true; rm -rf "$TMP"' EXIT
URL=
for _ in $(seq 1 200); do
  URL=$(sed -n 's/^plumbline listening on \(http:[^ ]*\).*/\1/p' "$LOG" | head -1)
  [[ -n $URL ]] && break
  kill -0 "$SERVER" 2>/dev/null || { cat "$LOG" >&2; fail "the service exited at start"; }
  sleep 0.1
done
[[ -n $URL ]] || fail "the service did not announce its address"
echo "schemathesis $SCHEMATHESIS_VERSION against $URL ($EXAMPLES examples per operation)"
# No --checks option: it would override the per-operation settings; the default runs them all.
timeout 1200 "$VENV/bin/st" --config-file tests/contract/schemathesis.toml run "$URL/openapi.json" \
  --max-examples "$EXAMPLES" --phases examples,coverage,fuzzing,stateful \
  --continue-on-failure --seed 1 --no-color \
  || fail "schemathesis found failures (above)"
