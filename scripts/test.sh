#!/usr/bin/env bash
# Run geofold's full test suite against a throwaway PostgreSQL 15 + PostGIS 3
# cluster bound to 127.0.0.1.
#
#   bash scripts/test.sh [extra args for cargo test...]
#
# e.g. bash scripts/test.sh -- --nocapture
#
# The cluster lives in a fresh temp dir and is stopped and removed on exit,
# including on failure and Ctrl-C. Tests find it through GEOFOLD_TEST_DB.
set -euo pipefail

ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
PGT="$ROOT/scripts/pg-throwaway.sh"

bash "$PGT" ensure-packages
# Python reference libraries in the project's own virtual environment.
GEOFOLD_PYTHON=$(bash "$ROOT/scripts/python-env.sh")
export GEOFOLD_PYTHON

# /tmp rather than $TMPDIR: the postgres OS user must be able to reach the
# directory, and the unix socket path inside it must stay short.
PGDIR=$(mktemp -d /tmp/geofold-pg.XXXXXX)

cleanup() {
    bash "$PGT" stop "$PGDIR" || true
}
trap cleanup EXIT
# Turn signals into a normal exit so the EXIT trap runs.
trap 'exit 130' INT
trap 'exit 143' TERM
trap 'exit 129' HUP

URI=$(bash "$PGT" start "$PGDIR")
export GEOFOLD_TEST_DB="$URI"
# The cluster is up by now: a server that does not answer is retried for
# 2 s, not the default 30 s, so connection tests that expect a refusal stay quick.
export GEOFOLD_CONNECT_RETRY=2
port=${URI##*:}
port=${port%%/*}
echo "scripts/test.sh: throwaway PostGIS listening on 127.0.0.1:$port (GEOFOLD_TEST_DB=$URI)" >&2

if ! command -v cargo >/dev/null 2>&1 && [ -x "${CARGO_HOME:-$HOME/.cargo}/bin/cargo" ]; then
    PATH="$PATH:${CARGO_HOME:-$HOME/.cargo}/bin"
fi

cd "$ROOT"
status=0
cargo test --all-targets --locked "$@" || status=$?
exit "$status"
