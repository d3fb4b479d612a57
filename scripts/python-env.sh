#!/usr/bin/env bash
# Create (or reuse) the project's own Python virtual environment for the
# test-time reference libraries (numpy, scipy, statsmodels, scikit-learn,
# libpysal, esda) and print the path of its python on stdout.
#
#   PY=$(bash scripts/python-env.sh)
#
# The environment lives in target/python-env and is rebuilt when
# tests/python/requirements.txt changes. Nothing is installed into the
# system's Python. Diagnostics go to stderr.
set -euo pipefail

ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
REQ="$ROOT/tests/python/requirements.txt"
ENV_DIR="$ROOT/target/python-env"
STAMP="$ENV_DIR/.requirements"

log() { printf 'python-env: %s\n' "$*" >&2; }

if [ -x "$ENV_DIR/bin/python" ] && [ -f "$STAMP" ] && cmp -s "$REQ" "$STAMP"; then
    printf '%s\n' "$ENV_DIR/bin/python"
    exit 0
fi

base=$(command -v python3 || true)
[ -n "$base" ] || { log "python3 not found"; exit 1; }
if ! "$base" -m venv --help >/dev/null 2>&1; then
    log "python3 has no venv module; installing python3-venv with apt"
    DEBIAN_FRONTEND=noninteractive apt-get -o DPkg::Lock::Timeout=600 install -y -q python3-venv </dev/null >&2
fi
rm -rf "$ENV_DIR"
mkdir -p "$(dirname "$ENV_DIR")"
log "creating $ENV_DIR"
"$base" -m venv "$ENV_DIR" >&2
"$ENV_DIR/bin/python" -m pip install --quiet --disable-pip-version-check -r "$REQ" >&2
cp "$REQ" "$STAMP"
printf '%s\n' "$ENV_DIR/bin/python"
