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
cargo test --locked --all-targets -- --skip powerloss

# The power-loss test cuts the power 48 times at seeded points (about a minute
# in a debug build); the timeout keeps a hang in its VFS from stalling CI.
say "power loss: saves through a SQLite VFS that keeps only fsynced writes (tests/powerloss.rs)"
timeout 600 cargo test --locked --test integration powerloss

say "fuzzing: a short run of each target (cargo-fuzz from crates.io into .tools/; libFuzzer)"
if [ ! -x .tools/bin/cargo-fuzz ]; then
  cargo install --locked cargo-fuzz --version 0.13.2 --root .tools
fi
# The pinned stable toolchain: no sanitizer, and RUSTC_BOOTSTRAP=1 for the
# unstable flags cargo-fuzz passes to rustc. Each target starts from the
# committed seeds and stops after FUZZ_SECONDS; a crash fails the run and
# leaves the input in fuzz/artifacts/<target>/. The timeout bounds the build.
FUZZ_SECONDS="${FUZZ_SECONDS:-30}"
for target in import_tables changeset_reader; do
  mkdir -p "fuzz/corpus/$target"
  (cd fuzz && RUSTC_BOOTSTRAP=1 timeout 1500 ../.tools/bin/cargo-fuzz run --sanitizer none "$target" \
    "corpus/$target" "seeds/$target" -- -max_total_time="$FUZZ_SECONDS" -timeout=10 -rss_limit_mb=2048 -print_final_stats=1)
done

say "independent checks in Python: setting up .venv (pip install -r tests/python/requirements.txt)"
if ! python3 -c 'import venv, ensurepip' >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    say "installing python3-venv (apt-get)"
    apt-get update -qq && apt-get install -y --no-install-recommends python3-venv
  else
    echo "python3 with venv is needed; install python3-venv." >&2
    exit 1
  fi
fi
[ -x .venv/bin/python ] || python3 -m venv .venv
.venv/bin/python -m pip install --quiet --disable-pip-version-check -r tests/python/requirements.txt

say "independent checks (pytest tests/python): data package by frictionless and pandas; statistics vs scipy, numpy, lifelines"
cargo build --locked --quiet
FIELDCAGE_BIN="$PWD/target/debug/fieldcage" FIELDCAGE_PROBE="$PWD/target/debug/fieldcage-probe" .venv/bin/python -m pytest -q tests/python

say "browser end-to-end tests: Debian chromium + playwright-core (tests/e2e)"
if [ ! -x /usr/bin/chromium ]; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    say "installing Debian's chromium for the browser tests (apt-get install chromium)"
    apt-get update -qq && apt-get install -y --no-install-recommends chromium fonts-dejavu-core
  else
    echo "the browser tests need Debian's chromium at /usr/bin/chromium (apt-get install chromium)" >&2
    exit 1
  fi
fi
if ! command -v npm >/dev/null 2>&1; then
  echo "the browser tests need Node.js 20 with npm" >&2
  exit 1
fi
# playwright-core never downloads a browser; it drives /usr/bin/chromium.
(cd tests/e2e && npm ci --no-audit --no-fund --loglevel=error)
rm -rf test-artifacts/e2e
FIELDCAGE_BIN="$PWD/target/debug/fieldcage" timeout 1200 node --test --test-force-exit --test-concurrency=1 tests/e2e/
echo "screenshots: test-artifacts/e2e/"

say "tablet app (src-tauri): system packages for Tauri 2 on Linux"
if ! pkg-config --exists webkit2gtk-4.1 2>/dev/null || ! command -v WebKitWebDriver >/dev/null 2>&1 || ! command -v xvfb-run >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    say "installing libwebkit2gtk-4.1-dev, webkit2gtk-driver and xvfb (apt-get)"
    apt-get update -qq && apt-get install -y --no-install-recommends libwebkit2gtk-4.1-dev webkit2gtk-driver xvfb xauth
  else
    echo "the tablet app needs libwebkit2gtk-4.1-dev, webkit2gtk-driver and xvfb (apt-get install ...)" >&2
    exit 1
  fi
fi

say "tablet app: lints and command tests without a webview (cargo test -p fieldcage-tablet)"
cargo clippy -p fieldcage-tablet --all-targets --locked -- -D warnings
cargo test -p fieldcage-tablet --locked

say "tablet app: WebDriver end-to-end test under Xvfb (tauri-driver from crates.io into .tools/)"
if [ ! -x .tools/bin/tauri-driver ]; then
  cargo install --locked tauri-driver --version 2.1.0 --root .tools
fi
# --test-force-exit and the timeout: a WebDriver process left behind must not hang CI.
TAURI_DRIVER="$PWD/.tools/bin/tauri-driver" FIELDCAGE_TABLET="$PWD/target/debug/fieldcage-tablet" \
  timeout 900 xvfb-run -a node --test --test-force-exit tests/e2e/tablet.webdriver.mjs

say "documentation builds without warnings (cargo doc)"
RUSTDOCFLAGS="-D warnings" cargo doc --no-deps --locked --quiet

say "documentation examples (cargo test --doc; one shows the store's connection is private)"
cargo test --doc --workspace --exclude fieldcage-tablet --locked --quiet

say "all tests passed"
