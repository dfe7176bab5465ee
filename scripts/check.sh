#!/usr/bin/env bash
# Runs exactly what CI runs: formatting, clippy with warnings as errors, the tests (release, as in
# the README), and the docs. Usage: scripts/check.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo fmt --all -- --check
cargo clippy --release --all-targets -- -D warnings
cargo test --release
RUSTDOCFLAGS="-D warnings" cargo doc --release --no-deps
