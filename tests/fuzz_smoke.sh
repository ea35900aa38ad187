#!/usr/bin/env bash
# Fuzz smoke run for CI: the property fuzzers of tests/fuzz_props.rs with a larger budget than the
# default `cargo test` (2,000 cases per target). Deterministic; about a minute on a 2-core machine.
# Override with KNOTWISE_FUZZ_CASES / KNOTWISE_FUZZ_SEED. A failing input is saved to target/fuzz-failures/.
set -uo pipefail
cd "$(dirname "$0")/.."
export KNOTWISE_FUZZ_CASES="${KNOTWISE_FUZZ_CASES:-15000}"
echo "fuzz smoke: ${KNOTWISE_FUZZ_CASES} cases per target, seed ${KNOTWISE_FUZZ_SEED:-default}"
log="$(mktemp)"
CARGO_PROFILE_RELEASE_LTO=false CARGO_PROFILE_RELEASE_CODEGEN_UNITS=16 cargo test --release --test fuzz_props -- --nocapture --test-threads=2 >"$log" 2>&1
status=$?
grep -aE '^fuzz |test result|panicked|input saved' "$log" || true
if [ "$status" -ne 0 ]; then
  tail -n 40 "$log"
fi
rm -f "$log"
exit "$status"
