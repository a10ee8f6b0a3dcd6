#!/usr/bin/env bash
# Proves a mainstream generator (openapi-python-client, pinned) turns openapi/plumbline.json into
# a client with every type, and that the generated client decides the recorded requests of
# demo-requests/ and parses each answer into its generated Decision model.
#
# Usage: tests/contract/client.sh [BINARY]   (default target/debug/plumbline)
# PLUMBLINE_OPENAPI_DOC=FILE checks another document (default openapi/plumbline.json).
# Needs python3 (with venv) and PyPI, or a pip cache, for the first run.
set -euo pipefail

# A BINARY or document given by the caller is relative to the caller's directory.
from_caller() { if [[ $1 = /* ]]; then echo "$1"; else echo "$PWD/$1"; fi; }
BINARY=target/debug/plumbline
DOC=openapi/plumbline.json
if [[ -n ${1:-} ]]; then BINARY=$(from_caller "$1"); fi
if [[ -n ${PLUMBLINE_OPENAPI_DOC:-} ]]; then DOC=$(from_caller "$PLUMBLINE_OPENAPI_DOC"); fi

cd "$(dirname "${BASH_SOURCE[0]}")/../.."   # the repo root: the other paths are relative to it
GENERATOR_VERSION=0.29.1
# The generated project builds with poetry-core (the generator's default metadata); pinning it in
# the venv and building without isolation keeps the install offline once the venv exists.
POETRY_CORE_VERSION=2.5.0
VENV=target/openapi-client-venv
OUT=target/openapi-client
PROJECT=$OUT/plumbline-client    # project_name_override in config.yml
PY=$VENV/bin/python

fail() { echo "openapi client check: FAIL: $*" >&2; exit 1; }

[[ -x $BINARY ]] || fail "no executable $BINARY (build it first)"
[[ -f $DOC ]] || fail "no OpenAPI document $DOC"

# 1. A venv with the pinned generator; reused when it already has the right versions.
installed() {   # prints the installed version of $1 in the venv, or nothing
  "$PY" -c "import importlib.metadata as m, sys; print(m.version(sys.argv[1]))" "$1" 2>/dev/null || true
}
if [[ ! -x $PY ]]; then
  python3 -m venv "$VENV"
fi
if [[ $(installed openapi-python-client) != "$GENERATOR_VERSION" || $(installed poetry-core) != "$POETRY_CORE_VERSION" ]]; then
  echo "installing openapi-python-client==$GENERATOR_VERSION into $VENV"
  "$PY" -m pip install --quiet --disable-pip-version-check \
    "openapi-python-client==$GENERATOR_VERSION" "poetry-core==$POETRY_CORE_VERSION"
fi

# 2. Generate afresh. Any warning or error means the generator dropped a type, a response or an
# operation (it still exits 0 for most of them unless --fail-on-warning), so both count.
rm -rf "$OUT"
mkdir -p "$OUT"
echo "generating a client from $DOC"
gen_status=0
gen_log=$("$VENV/bin/openapi-python-client" generate --fail-on-warning \
  --path "$DOC" --config tests/contract/config.yml --output-path "$PROJECT" 2>&1) || gen_status=$?
# The one line it prints on success names the output path, which is no evidence either way.
gen_said=$(grep -v '^Generating ' <<<"$gen_log" || true)
if (( gen_status != 0 )) || grep -qiE 'warning|error|unable to|could not|cannot|failure|removal' <<<"$gen_said"; then
  printf '%s\n' "$gen_log" >&2
  fail "openapi-python-client $GENERATOR_VERSION could not generate every part of $DOC (exit $gen_status; output above)"
fi
[[ -f $PROJECT/plumbline_client/models/decision.py ]] || fail "the generated client has no Decision model"

# 3. Install the generated package (its httpx/attrs dependencies come with the generator).
"$PY" -m pip uninstall --quiet --disable-pip-version-check -y plumbline-client >/dev/null 2>&1 || true
"$PY" -m pip install --quiet --disable-pip-version-check --no-build-isolation "$PROJECT" \
  || fail "pip could not install the generated client $PROJECT"

# 4. The service on an OS-chosen loopback port with a fresh store: a pair with an idempotency key
# would be answered from an old store, and records must not pile up between runs.
TMP=$(mktemp -d)
SERVER_PID=
cleanup() {
  if [[ -n $SERVER_PID ]]; then
    kill "$SERVER_PID" 2>/dev/null || true
    wait "$SERVER_PID" 2>/dev/null || true
  fi
  rm -rf "$TMP"
}
trap cleanup EXIT
# Our flags name the model, keys, address and store; keep a developer's environment out of it.
unset PLUMBLINE_MODELS PLUMBLINE_KEYS PLUMBLINE_METRICS_KEY
"$BINARY" serve --keys models/demo-keys.json --addr 127.0.0.1:0 \
  --store "sqlite:$TMP/records.sqlite3" 2>"$TMP/server.log" &
SERVER_PID=$!
URL=
for _ in $(seq 1 200); do   # up to 20 s for the listening line
  URL=$(grep -m1 -oE 'plumbline listening on http://[0-9.]+:[0-9]+' "$TMP/server.log" | sed 's/.* on //' || true)
  [[ -n $URL ]] && break
  if ! kill -0 "$SERVER_PID" 2>/dev/null; then
    cat "$TMP/server.log" >&2
    fail "$BINARY serve exited before listening"
  fi
  sleep 0.1
done
if [[ -z $URL ]]; then
  cat "$TMP/server.log" >&2
  fail "$BINARY serve did not say where it listens within 20 s"
fi
echo "service at $URL"

# 5. Decide the recorded requests through the generated client.
timeout 90 "$PY" tests/contract/decide.py "$URL" || fail "decide.py failed against $URL (see above)"
echo "openapi client check: OK ($DOC, openapi-python-client $GENERATOR_VERSION)"
