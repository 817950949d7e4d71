#!/usr/bin/env bash
# Property-based fuzzing of the service's own OpenAPI document with
# schemathesis (PyPI), against the real binary on a fresh data directory
# with the invented demo on and an admin key, bounded in examples and time
# (and in hindcast runs per request and ensemble members per run, so that a
# triggered run of the debug build stays well inside the response-time check).
# It fails on any 5xx, any answer that breaks the document (status code,
# content type, headers, body schema), any schema-invalid request accepted,
# the stateful checks (links between operations, auth ignored), and any
# schema-valid request refused (`positive_data_acceptance`), except on the
# operations `schemathesis.toml` beside this script lists, each with the
# rule JSON Schema cannot state that makes the exception.
#
# Usage: tests/fuzz/openapi.sh [path/to/reachcast]   (default target/debug)
set -euo pipefail
cd "$(dirname "$0")/../.."
bin="${1:-target/debug/reachcast}"
venv="${SCHEMATHESIS_VENV:-target/fuzz-venv}"
if [ ! -x "$venv/bin/st" ]; then
  python3 -m venv "$venv"
  "$venv/bin/pip" install --quiet "schemathesis==4.32.5"
fi
data="$(mktemp -d)"
port="${FUZZ_PORT:-18377}"
key="$("$bin" keys create --name fuzz --role admin --data-dir "$data" | grep -o 'rck_[A-Za-z0-9_]*' | head -1)"
REACHCAST_AUTH_RATE_LIMIT_PER_SEC=1000000 REACHCAST_AUTH_RATE_LIMIT_BURST=1000000 \
REACHCAST_AUTH_ANONYMOUS_RATE_LIMIT_PER_SEC=1000000 REACHCAST_AUTH_ANONYMOUS_RATE_LIMIT_BURST=1000000 \
REACHCAST_LOG_FILTER=warn REACHCAST_FORECAST_MAX_HINDCAST_RUNS=3 REACHCAST_FORECAST_MAX_ENSEMBLE_MEMBERS=10 \
  "$bin" --data-dir "$data" --bind "127.0.0.1:$port" >"$data/server.log" 2>&1 &
server=$!
trap 'kill "$server" 2>/dev/null || true; wait "$server" 2>/dev/null || true; rm -rf "$data"' EXIT
for _ in $(seq 1 100); do
  curl -fsS "http://127.0.0.1:$port/ready" >/dev/null 2>&1 && break
  sleep 0.2
done
"$venv/bin/st" --config-file tests/fuzz/schemathesis.toml run "http://127.0.0.1:$port/api/openapi.json" \
  --max-examples "${FUZZ_EXAMPLES:-20}" --max-time "${FUZZ_SECONDS:-180}" \
  --request-timeout 20 --seed "${FUZZ_SEED:-20261203}" \
  -H "Authorization: Bearer $key"
if grep -q "panicked" "$data/server.log"; then
  echo "the server panicked during fuzzing:" >&2
  grep -A5 "panicked" "$data/server.log" >&2
  exit 1
fi
