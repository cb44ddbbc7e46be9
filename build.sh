#!/usr/bin/env bash
# The one entry point: setup, demo, test, atlas.
set -euo pipefail
cd "$(dirname "$0")"
CACHE="${VITRINE_CACHE:-$HOME/.cache/vitrine}"
mkdir -p "$CACHE"

setup_rust() {
  rustup target list --installed 2>/dev/null | grep -q wasm32-unknown-unknown || {
    echo "[setup] Rust wasm target"; rustup target add wasm32-unknown-unknown; }
  setup_wasm_bindgen
}

# Mesa's software Vulkan (lavapipe) and OpenGL (llvmpipe): the native golden-image tests draw
# through wgpu on them, and `bench-view --angle gl-egl` gives Chromium llvmpipe.
setup_mesa() {
  if ! ls /usr/share/vulkan/icd.d/lvp_icd*.json >/dev/null 2>&1 || ! ls /usr/lib/*/libEGL_mesa.so.0 >/dev/null 2>&1; then
    echo "[setup] Mesa's software Vulkan and OpenGL (lavapipe, llvmpipe)"
    local sudo=""; [ "$(id -u)" = 0 ] || sudo="sudo"
    $sudo apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq mesa-vulkan-drivers libvulkan1 libegl1 libegl-mesa0 libgl1-mesa-dri
  fi
}

setup() {
  setup_rust
  setup_browser
  setup_mesa
  echo "[setup] Python venv for the outside-reference tests ($CACHE/venv)"
  # numpy and scikit-learn are the outside references of the tests; umap-learn gives the method's a, b fit;
  # Pillow writes and decodes the reference images, scikit-image ships sample photographs; shapely
  # decides point-in-lasso for the corpus tests; krippendorff computes the agreement between coders,
  # statsmodels the Wilson intervals (scipy, which scikit-learn brings, the chi-square test);
  # imagehash the perceptual hash the copies are confirmed by; onnx writes the test image models and
  # onnxruntime runs them as the reference for `--model`; pyarrow writes Parquet and Arrow vectors;
  # pandas splits and counts the keyword lists of the multi-valued fields' test.
  if [ ! -x "$CACHE/venv/bin/python" ] || ! "$CACHE/venv/bin/python" -c "import numpy, sklearn, umap, PIL, skimage, shapely, krippendorff, statsmodels, scipy, imagehash, safetensors, openpyxl, onnx, onnxruntime, pyarrow, pandas" 2>/dev/null; then
    [ -x "$CACHE/venv/bin/python" ] || python3 -m venv "$CACHE/venv"
    "$CACHE/venv/bin/pip" install --progress-bar on numpy scikit-learn umap-learn pillow scikit-image shapely krippendorff statsmodels scipy imagehash safetensors openpyxl onnx onnxruntime pyarrow pandas
  fi
}

# The viewer: wasm module + bindings + page shell, in target/viewer (copied into every atlas).
build_viewer() {
  setup_wasm_bindgen
  echo "[viewer] compiling the viewer to WebAssembly"
  cargo build --locked -p vitrine-web --target wasm32-unknown-unknown --profile wasm-release
  rm -rf target/viewer.new
  mkdir -p target/viewer.new/viewer
  wasm-bindgen --target web --no-typescript --out-dir target/viewer.new/viewer \
    target/wasm32-unknown-unknown/wasm-release/vitrine_web.wasm
  cp web/index.html target/viewer.new/
  cp web/loader.js web/file-notice.js web/style.css target/viewer.new/viewer/
  # Into target/viewer, touching only the files that changed: the vitrine binary compiles these
  # files in (crates/vitrine-cli/build.rs) and is rebuilt when they change.
  if [ -d target/viewer ] && diff -rq target/viewer target/viewer.new >/dev/null; then
    rm -rf target/viewer.new
  else
    rm -rf target/viewer && mv target/viewer.new target/viewer
  fi
  export VITRINE_EMBED_VIEWER="$PWD/target/viewer"
}

setup_wasm_bindgen() {
  if ! wasm-bindgen --version 2>/dev/null | grep -q "0.2.130"; then
    echo "[setup] wasm-bindgen CLI 0.2.130 (one-time, a few minutes)"
    # Not --locked: the CLI's own lock file names a crate version the registry mirror may lack.
    cargo install wasm-bindgen-cli --version 0.2.130
  fi
}

# The demo: generate the invented archive (once), build its atlas. Its pictures are at most 320 px,
# so its top level of detail is 320 rather than the default 512.
build_demo() {
  if [ "${1:-}" = prebuilt ]; then
    # The test run's own release build made target/release/vitrine (with the viewer compiled in):
    # only the generator is built here.
    cargo build --locked --release -p vitrine-demo
  else
    build_viewer
    cargo build --locked --release -p vitrine-cli -p vitrine-demo
  fi
  local src="$CACHE/demo-source"
  # Regenerate when the generator's source changed since the cached copy was made.
  local stamp
  stamp="$(cat crates/vitrine-demo/src/*.rs crates/vitrine-demo/Cargo.toml | sha256sum | cut -c1-16)"
  if [ ! -f "$src/features.npy" ] || [ "$(cat "$src/.stamp" 2>/dev/null)" != "$stamp" ]; then
    echo "[demo] generating the invented demo archive"
    rm -rf "$src"
    ./target/release/vitrine-demo --out "$src"
    echo "$stamp" > "$src/.stamp"
  fi
  ./target/release/vitrine build --vectors "$src/features.npy" --vector-ids "$src/feature-ids.txt" \
    --catalogue "$src/records.csv" --images "$src/images" --title "Demo archive (invented)" \
    --levels 32,128,320 --viewer target/viewer --out demo-atlas/out
}

# The release binary copied to an empty folder builds an atlas from pictures alone (vectors by the
# built-in descriptor), and the atlas holds the viewer files compiled into the binary.
check_binary_alone() {
  local tmp
  tmp="$(mktemp -d)"
  # In a folder of its own: the program also looks for viewer files in the folder above it.
  mkdir "$tmp/bin"
  cp target/release/vitrine "$tmp/bin/"
  "$CACHE/venv/bin/python" - "$tmp/pictures" <<'PY'
import os, sys
from PIL import Image
os.makedirs(sys.argv[1])
for i in range(12):
    Image.new("RGB", (60 + 7 * i, 50), (20 * i, 200 - 15 * i, 90)).save(f"{sys.argv[1]}/p{i}.png")
PY
  (cd "$tmp" && env -u VITRINE_VIEWER bin/vitrine build --quiet --images pictures --no-thumb-cache --out atlas)
  cmp target/viewer/index.html "$tmp/atlas/index.html"
  diff -r target/viewer/viewer "$tmp/atlas/viewer"
  rm -rf "$tmp"
}

# The Python wheel (maturin, PyO3; the viewer files compiled in), installed into the venv and used
# by tests/python/notebook.py from outside the checkout.
check_wheel() {
  "$CACHE/venv/bin/python" -c "import maturin, pandas" 2>/dev/null ||
    "$CACHE/venv/bin/pip" install --progress-bar on maturin pandas
  rm -rf target/wheels
  "$CACHE/venv/bin/maturin" build --release --locked -m crates/vitrine-py/Cargo.toml -o target/wheels
  "$CACHE/venv/bin/pip" install --force-reinstall --no-deps target/wheels/vitrine-*.whl
  local tmp root="$PWD"
  tmp="$(mktemp -d)"
  (cd "$tmp" && "$CACHE/venv/bin/python" "$root/tests/python/notebook.py" "$tmp/work")
  rm -rf "$tmp"
}

# Browser-test tools: Debian's Chromium (test tools cannot download their own here) and playwright-core.
setup_browser() {
  if [ ! -x /usr/bin/chromium ]; then
    echo "[setup] Chromium from Debian (one-time, about a minute)"
    local sudo=""; [ "$(id -u)" = 0 ] || sudo="sudo"
    $sudo apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq chromium
  fi
  if [ ! -d tests/browser/node_modules/playwright-core ] || [ ! -d tests/browser/node_modules/pngjs ] ||
     [ ! -d tests/browser/node_modules/@iiif/parser ]; then
    echo "[setup] playwright-core, pngjs and @iiif/parser from npm"
    (cd tests/browser && npm ci --no-audit --no-fund)
  fi
}

run_tests() {
  setup
  echo "[test] formatting and lints (cargo fmt --check, cargo clippy -D warnings, native and wasm32)"
  cargo fmt --all --check
  cargo clippy --locked --workspace --all-targets --release --features vitrine-view/gpu -- -D warnings
  cargo clippy --locked -p vitrine-web --target wasm32-unknown-unknown -- -D warnings
  # The viewer first: the vitrine binary the tests build compiles its files in. One cargo invocation
  # with one feature set builds every crate once (the golden images need the renderer's wgpu
  # hand-off, feature vitrine-view/gpu); the demo and the binary-alone check reuse its binary.
  build_viewer
  echo "[test] cargo test (workspace; golden images of the renderer through wgpu on Mesa's software Vulkan and GL)"
  XDG_RUNTIME_DIR="${XDG_RUNTIME_DIR:-/tmp}" cargo test --workspace --locked --release --features vitrine-view/gpu 2>&1
  echo "[test] demo atlas for the browser test"
  build_demo prebuilt
  echo "[test] the vitrine binary alone (viewer compiled in, no checkout beside it)"
  check_binary_alone
  echo "[test] the Python package: wheel built with maturin, installed, used as a notebook would"
  check_wheel
  echo "[test] viewer in headless Chromium (software WebGL)"
  VITRINE_BIN="$PWD/target/release/vitrine" VITRINE_ATLAS="$PWD/demo-atlas/out" \
    VITRINE_CATALOGUE="$CACHE/demo-source/records.csv" VITRINE_ARTIFACTS="$PWD/tests/artifacts" \
    VITRINE_PYTHON="$CACHE/venv/bin/python" \
    node --test tests/browser/
}

case "${1:-}" in
  setup) setup ;;
  test) run_tests ;;
  bench-map)
    setup
    echo "[bench] reference libraries into the venv (umap-learn, pynndescent, hnswlib)"
    "$CACHE/venv/bin/python" -c "import umap, pynndescent, hnswlib" 2>/dev/null ||
      "$CACHE/venv/bin/pip" install --progress-bar on umap-learn pynndescent hnswlib
    cargo build --locked --release -p vitrine-cli -p vitrine-bench
    shift
    "$CACHE/venv/bin/python" bench/bench_map.py --vitrine-bench "$PWD/target/release/vitrine-bench" "$@" ;;
  bench-images)
    setup
    if ! command -v vipsthumbnail >/dev/null; then
      echo "[bench] vipsthumbnail from Debian (libvips-tools)"
      sudo=""; [ "$(id -u)" = 0 ] || sudo="sudo"
      $sudo apt-get update -qq
      DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq libvips-tools
    fi
    cargo build --locked --release -p vitrine-cli -p vitrine-bench
    shift
    "$CACHE/venv/bin/python" bench/bench_images.py --vitrine-bench "$PWD/target/release/vitrine-bench" "$@" ;;
  bench-vectors)
    setup
    cargo build --locked --release -p vitrine-cli
    shift
    "$CACHE/venv/bin/python" bench/bench_vectors.py --vitrine "$PWD/target/release/vitrine" "$@" ;;
  bench-view)
    setup
    build_viewer
    cargo build --locked --release -p vitrine-cli -p vitrine-bench
    shift
    "$CACHE/venv/bin/python" bench/bench_view.py --vitrine "$PWD/target/release/vitrine" --viewer "$PWD/target/viewer" "$@" ;;
  fuzz)
    # cargo-fuzz on the nightly toolchain: each reader of what comes from outside for SECONDS
    # (default 60) from seeds made here; corpora and crashers stay in target/ (a crasher is a
    # file in target/fuzz-artifacts/TARGET/: make it a regression test).
    secs="${2:-60}"
    setup
    rustup toolchain list | grep -q '^nightly' || rustup toolchain install nightly --profile minimal
    command -v cargo-fuzz >/dev/null || cargo install cargo-fuzz --version 0.13.2
    seeds=target/fuzz-corpus
    mkdir -p "$seeds"/{npy,catalogue,dates,corpus_file,link,manifest}
    "$CACHE/venv/bin/python" - "$seeds/npy" <<'PY'
import sys, numpy as np
for i, dt in enumerate(["<f4", ">f8", "<f2", "i1", "u1", "<i8", "?"]):
    np.save(f"{sys.argv[1]}/seed{i}.npy", (np.arange(12).reshape(3, 4) % 3).astype(dt))
np.save(f"{sys.argv[1]}/fortran.npy", np.asfortranarray(np.ones((2, 5), "<f4")))
PY
    printf 'id,title,dating,height\nA1,"Harbour, dusk",c. 1540,12.5\nA2,"The ""old"" quay",1550-75,\n' > "$seeds/catalogue/seed.csv"
    for d in "c. 1540" "1550-75" "16th century" "450 BC" "1540s" "before 1600" "2023-04-05" "mid 17th cent."; do
      printf '%s' "$d" > "$seeds/dates/$(printf '%s' "$d" | tr -c 'a-z0-9' _)"
    done
    printf '%s' '{"format": "vitrine-corpus", "format_version": 1, "atlas": {"title": "t", "manifest_sha256": "00", "item_count": 3}, "build": {}, "map": "similarity", "steps": [{"op": "add", "rect": [0, 0, 1, 1]}], "filters": [], "count": 0, "ids": [], "made": {"tool": "vitrine", "tool_version": "0", "time": "2026-01-01T00:00:00Z", "by": "viewer"}}' > "$seeds/corpus_file/seed.json"
    printf '%s' '{"format": "vitrine-corpus", "format_version": 2, "atlas": {"title": "t", "manifest_sha256": "00", "item_count": 3}, "build": {}, "map": "similarity", "steps": [], "filters": [], "count": 0, "ids": [], "made": {"tool": "vitrine", "tool_version": "0", "time": "2026-01-01T00:00:00Z", "by": "viewer"}, "codebook": {"variables": [{"name": "framing", "kind": "one", "values": [{"value": "full", "key": 1}, {"value": "half"}]}, {"name": "motifs", "kind": "several", "values": [{"value": "tree"}]}, {"name": "figures", "kind": "number"}]}, "codes": [{"item": "a", "variable": "framing", "value": "half", "coder": "ana", "time": "2026-01-01T00:00:00.5Z"}, {"item": "a", "variable": "motifs", "value": ["tree"], "coder": "ana", "time": "2026-01-01T00:00:00Z", "settled": true}, {"item": "a", "variable": "figures", "value": 2.5, "coder": "ben", "time": "2026-01-01T00:00:00Z"}]}' > "$seeds/corpus_file/seed2.json"
    printf '%s' '{"v":1,"map":"similarity","view":[0.1,0.2,1.5],"build":"0011223344556677","steps":[{"op":"add","items":"AQI"}],"filters":[]}' > "$seeds/link/seed.json"
    [ -f demo-atlas/out/atlas.json ] && cp demo-atlas/out/atlas.json "$seeds/manifest/demo.json"
    for t in npy catalogue dates corpus_file link manifest; do
      echo "[fuzz] $t for ${secs} s"
      mkdir -p "target/fuzz-artifacts/$t"
      cargo +nightly fuzz run --fuzz-dir fuzz --target-dir target/fuzz -s none "$t" "$seeds/$t" -- \
        -max_total_time="$secs" -artifact_prefix="target/fuzz-artifacts/$t/" -print_final_stats=1 2>&1 |
        grep -E "^(stat::number_of_executed_units|stat::peak_rss_mb|Done|==|SUMMARY)|panicked|crash-" || true
    done
    if ls target/fuzz-artifacts/*/crash-* >/dev/null 2>&1; then
      echo "[fuzz] crashers found:"; ls target/fuzz-artifacts/*/crash-*; exit 1
    fi
    echo "[fuzz] no crasher" ;;
  atlas) build_viewer; echo "viewer files in target/viewer (vitrine build copies them into each atlas)" ;;
  demo)
    setup_rust
    build_demo
    echo "[demo] serving demo-atlas/out"
    exec ./target/release/vitrine serve demo-atlas/out --port "${PORT:-8080}" ;;
  *) echo "usage: ./build.sh setup|demo|test|atlas|fuzz [SECONDS]|bench-map [--million]|bench-images [--collection N]|bench-vectors|bench-view [--sizes 100000,1000000]" >&2; exit 2 ;;
esac
