#!/usr/bin/env bash
# The one entry point: setup, demo, test, atlas.
set -euo pipefail
cd "$(dirname "$0")"
CACHE="${VITRINE_CACHE:-$HOME/.cache/vitrine}"
mkdir -p "$CACHE"

setup() {
  echo "[setup] Rust wasm target"
  rustup target list --installed 2>/dev/null | grep -q wasm32-unknown-unknown || rustup target add wasm32-unknown-unknown
  echo "[setup] Python venv for the outside-reference tests ($CACHE/venv)"
  if [ ! -x "$CACHE/venv/bin/python" ] || ! "$CACHE/venv/bin/python" -c "import numpy, sklearn" 2>/dev/null; then
    python3 -m venv "$CACHE/venv"
    "$CACHE/venv/bin/pip" install --progress-bar on numpy scikit-learn
  fi
}

run_tests() {
  setup
  echo "[test] cargo test (workspace)"
  cargo test --workspace --locked --release 2>&1
}

case "${1:-}" in
  setup) setup ;;
  test) run_tests ;;
  demo)
    echo "The demo atlas is not built yet: see issue 2's notes. Run ./build.sh test for what exists." >&2
    exit 1 ;;
  *) echo "usage: ./build.sh setup|demo|test" >&2; exit 2 ;;
esac
