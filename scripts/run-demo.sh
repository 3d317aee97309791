#!/usr/bin/env bash
# Builds fieldcage and serves the invented demo season: creates
# demo-run/demo.db afresh, prints the cage layout, runs the day's-end checks,
# exports the tidy tables to demo-run/export/, then serves the tablet UI at
# http://127.0.0.1:8088/ on day 21 of the demo season, as the season stood that
# mid-morning (demo-run/field-day.db: half of the day's cages still due, nothing
# recorded after it), so a newcomer can practise (Ctrl-C to stop).
# Installs what it needs first.
set -euo pipefail
cd "$(dirname "$0")/.."

say() { printf '\n==> %s\n' "$*"; }

if ! command -v cargo >/dev/null 2>&1; then
  echo "cargo is missing: install Rust 1.95 with rustup (https://rustup.rs), then run this again." >&2
  exit 1
fi
if ! command -v cc >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    say "installing a C compiler for the bundled SQLite (apt-get install gcc libc6-dev)"
    apt-get update -qq && apt-get install -y --no-install-recommends gcc libc6-dev
  else
    echo "a C compiler (cc) is needed to build the bundled SQLite; install gcc." >&2
    exit 1
  fi
fi

say "building fieldcage (release)"
cargo build --release --locked --quiet
bin=target/release/fieldcage

say "creating the demo season in demo-run/demo.db (invented data)"
rm -rf demo-run
mkdir -p demo-run
"$bin" demo --db demo-run/demo.db

say "layout: blocks, cages and treatments"
"$bin" layout --db demo-run/demo.db

say "day's-end checks over the whole season (the demo's planted problems; exit 1 = errors open)"
"$bin" check --db demo-run/demo.db --all || [ $? -eq 1 ]

say "exporting the tidy tables to demo-run/export/"
"$bin" export --db demo-run/demo.db --out demo-run/export

say "serving the tablet UI on day 21 of the demo season, as it stood at 09:45 that day: cages still due (open the address below; Ctrl-C to stop)"
exec "$bin" serve --db demo-run/field-day.db --demo --port "${PORT:-8088}" --today 2026-06-01
