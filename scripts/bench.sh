#!/usr/bin/env bash
# The benchmark command: builds fieldcage in release mode and runs `fieldcage-bench`:
# synthetic seasons (a season is 200 cages x 20 visits x 40 species; pass
# --cages/--visits/--species to change it), one report with every figure, ratio and
# target. The full run builds 1, 2, 5 and 10 seasons (about half an hour, several GB
# in the scratch folder); `--max-seasons 2 --saves 200` is a quick run, `--dir D`
# puts the scratch databases on the disk to measure.
set -euo pipefail
cd "$(dirname "$0")/.."
printf '==> building fieldcage and its benchmark (release)\n'
cargo build --release --locked --quiet
printf '==> running the benchmark (this machine, one run)\n\n'
exec target/release/fieldcage-bench "$@"
