#!/usr/bin/env bash
# Fuzzes the readers and the fill (fuzz/fuzz_targets) for SECONDS each (default 60) with cargo-fuzz
# and libFuzzer. Not part of CI. Needs the nightly toolchain (`rustup toolchain install nightly`)
# and cargo-fuzz (installed here if missing). New interesting inputs go to fuzz/corpus/TARGET
# (commit them); a crash is saved in fuzz/artifacts/TARGET and must become a test in
# tests/regression.rs named after what it reproduces.
# Usage: scripts/fuzz.sh [SECONDS] [TARGET...]
set -euo pipefail
cd "$(dirname "$0")/.."
secs=${1:-60}
shift || true
targets=("$@")
[ ${#targets[@]} -gt 0 ] || targets=(load_raster load_mask fill_small)
command -v cargo-fuzz >/dev/null 2>&1 || cargo install cargo-fuzz
for t in "${targets[@]}"; do
    mkdir -p "fuzz/corpus/$t"
    echo "== $t for ${secs}s"
    cargo +nightly fuzz run "$t" "fuzz/corpus/$t" -- -max_total_time="$secs" -rss_limit_mb=2048 -max_len=65536
done
