# Shared by tests/reference/regen.sh and bench/explain_compare.sh; source it from the repo root.
#
# Creates (once) a virtual environment at ${PLUMBLINE_PYENV:-target/pyenv} with the pinned packages
# of tests/reference/requirements.txt and sets PLUMBLINE_PY to its python. The install is redone
# only when requirements.txt changes (its SHA-256 is kept in the venv). Needs python3 (3.11) with
# the venv module and access to PyPI; wheels only, nothing is compiled.
#
#   PLUMBLINE_PYENV   where the venv lives (default target/pyenv)
#   PLUMBLINE_PYTHON  interpreter used to create it (default python3)

plumbline_venv() {
    local env="${PLUMBLINE_PYENV:-target/pyenv}"
    local python="${PLUMBLINE_PYTHON:-python3}"
    local req="tests/reference/requirements.txt"
    local stamp="$env/.plumbline-requirements.sha256"
    local want
    want="$(sha256sum "$req" | cut -d' ' -f1)"
    if [ ! -x "$env/bin/python" ]; then
        echo "venv: creating $env with $("$python" --version 2>&1)" >&2
        "$python" -m venv "$env" || return 1
        rm -f "$stamp"
    fi
    if [ "$(cat "$stamp" 2>/dev/null)" != "$want" ]; then
        echo "venv: installing $req into $env" >&2
        "$env/bin/python" -m pip install --quiet --disable-pip-version-check --no-input \
            --only-binary=:all: -r "$req" || return 1
        "$env/bin/python" -m pip check --disable-pip-version-check >&2 || return 1
        echo "$want" >"$stamp"
    fi
    PLUMBLINE_PY="$env/bin/python"
    export PLUMBLINE_PY
}
