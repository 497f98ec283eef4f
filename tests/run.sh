#!/usr/bin/env bash
# Every check spreadscope has, on a fresh Debian machine or a developer's one:
# installs what is missing (Debian's chromium for the browser test, openssl
# for the HTTPS test, the node modules for the front-end type check and the browser driver), then runs the
# front-end type check, rustfmt, clippy, rustdoc and all tests including the
# browser test, then the Slurm job-array check when a one-node cluster can be
# started here (tests/slurm/array.sh). Works as root and as a user with sudo. `.ci/run` calls exactly
# this script; the README gives it as the test command.
set -euo pipefail
cd "$(dirname "$0")/.."

as_root() {
  if [ "$(id -u)" -eq 0 ]; then
    "$@"
  elif command -v sudo >/dev/null 2>&1; then
    sudo "$@"
  else
    echo "tests/run.sh: need root or sudo to run: $*" >&2
    exit 1
  fi
}

if [ ! -x /usr/bin/chromium ]; then
  echo "== install: Debian's chromium (browser test)"
  as_root env DEBIAN_FRONTEND=noninteractive apt-get update -qq
  as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
fi
if ! command -v openssl >/dev/null 2>&1; then
  echo "== install: openssl (the HTTPS test makes a self-signed pair with it)"
  as_root env DEBIAN_FRONTEND=noninteractive apt-get update -qq
  as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq openssl >/dev/null
fi
if [ ! -d tests/browser/node_modules/playwright-core ] || [ ! -d tests/browser/node_modules/typescript ]; then
  echo "== install: node modules (playwright-core, typescript)"
  npm ci --prefix tests/browser --no-audit --no-fund
fi

echo "== front end: type check (tsc --checkJs)"
npm --prefix tests/browser run --silent typecheck

echo "== rustfmt"
cargo fmt --all -- --check

echo "== clippy (-D warnings)"
cargo clippy --locked --workspace --all-targets -- -D warnings

echo "== rustdoc (-D warnings: broken links fail)"
RUSTDOCFLAGS="-D warnings" cargo doc --locked --workspace --no-deps --quiet

echo "== tests (including the browser test)"
cargo test --locked --workspace -- --include-ignored

echo "== Slurm: the README's job-array template on a one-node cluster"
slurm=0
tests/slurm/array.sh target/debug/spreadscope || slurm=$?
if [ "$slurm" -eq 3 ]; then
  echo "   not run: no one-node Slurm cluster could be started on this machine (reason above)"
elif [ "$slurm" -ne 0 ]; then
  exit "$slurm"
fi
