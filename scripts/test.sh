#!/usr/bin/env bash
# Runs every test of fieldcage: formatting, lints, the Rust unit and integration
# tests (which include the demo-data drift check and the CLI round trip).
# Installs what it needs first. Safe to run repeatedly.
set -euo pipefail
cd "$(dirname "$0")/.."

say() { printf '\n==> %s\n' "$*"; }

say "checking the build tools"
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
cargo --version

say "formatting (cargo fmt --check)"
cargo fmt --all -- --check

say "lints (cargo clippy --all-targets -- -D warnings)"
cargo clippy --all-targets --locked -- -D warnings

say "unit and integration tests (cargo test)"
cargo test --locked --all-targets

say "documentation builds without warnings (cargo doc)"
RUSTDOCFLAGS="-D warnings" cargo doc --no-deps --locked --quiet

say "all tests passed"
