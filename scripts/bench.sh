#!/usr/bin/env bash
# The benchmark command: builds fieldcage in release mode, generates a synthetic
# season (default 200 cages x 20 visits x 40 species; pass --cages/--visits/--species
# to change it) and prints one table of timings.
set -euo pipefail
cd "$(dirname "$0")/.."
printf '==> building fieldcage (release)\n'
cargo build --release --locked --quiet
printf '==> running the benchmark (this machine, one run)\n\n'
exec target/release/fieldcage bench "$@"
