#!/usr/bin/env bash
# Batch throughput (a figure, not a test): N survey frames of SIZE² 16-bit with one bad-pixel map,
# repaired by `reweave batch`; prints files per second and the share of reading, filling, writing.
# Usage: scripts/batch-bench.sh [N=200] [SIZE=2048] [JOBS=2]
set -euo pipefail
cd "$(dirname "$0")/.."
n=${1:-200}; size=${2:-2048}; jobs=${3:-2}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cargo build --release --quiet
target/release/reweave samples --frames "$n" --size "$size" --out "$work/in" > /dev/null
mv "$work/in/badpix.png" "$work/badpix.png"
target/release/reweave batch "$work/in" --mask "$work/badpix.png" -o "$work/out" --jobs "$jobs" --quiet
