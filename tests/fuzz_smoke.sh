#!/usr/bin/env bash
# Fuzz smoke run for CI: the property fuzzers of tests/fuzz_props.rs with a larger budget than the
# default `cargo test` (2,000 cases per target). Deterministic; about a minute on a 2-core machine.
# Override with KNOTWISE_FUZZ_CASES / KNOTWISE_FUZZ_SEED. A failing input is saved to target/fuzz-failures/.
set -euo pipefail
cd "$(dirname "$0")/.."
export KNOTWISE_FUZZ_CASES="${KNOTWISE_FUZZ_CASES:-15000}"
echo "fuzz smoke: ${KNOTWISE_FUZZ_CASES} cases per target, seed ${KNOTWISE_FUZZ_SEED:-default}"
cargo test --release --test fuzz_props -- --nocapture --test-threads=2 2>&1 | grep -E '^fuzz |test result|panicked|FAILED|input saved' || true
# grep hides the exit status: rerun quietly to fail the script if a case failed (cached build, same seed).
cargo test --release --quiet --test fuzz_props -- --test-threads=2 >/dev/null
