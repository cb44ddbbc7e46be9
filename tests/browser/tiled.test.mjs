// A tiled atlas (format 3) of the invented demo archive, forced into tiles of at most 300 items
// (`vitrine build --tile-items 300`), in headless Chromium with software WebGL: the first picture
// comes from the overview pictures, zoomed in the leaves' items and their thumbnails are drawn,
// and a tile that cannot be loaded (its file removed) leaves its part blank with a note while the
// rest of the map still works. Needs VITRINE_BIN and VITRINE_CATALOGUE (the demo source's
// records.csv, beside its vectors and images).
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { execFileSync, spawn } from "node:child_process";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { chromium } from "playwright-core";
import { PNG } from "pngjs";

const BIN = process.env.VITRINE_BIN;
const CATALOGUE = process.env.VITRINE_CATALOGUE;
const ARTIFACTS = path.resolve(process.env.VITRINE_ARTIFACTS || "tests/artifacts");
fs.mkdirSync(ARTIFACTS, { recursive: true });
const FLAGS = [
  "--no-sandbox", "--use-angle=swiftshader", "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist",
  "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic",
];

let browser, server, url, manifest, dir;

before(async () => {
  assert.ok(BIN && CATALOGUE, "set VITRINE_BIN and VITRINE_CATALOGUE");
  const src = path.dirname(CATALOGUE);
  dir = fs.mkdtempSync(path.join(os.tmpdir(), "vitrine-tiled-"));
  const out = path.join(dir, "atlas");
  execFileSync(BIN, ["build", "--quiet", "--vectors", path.join(src, "features.npy"),
    "--vector-ids", path.join(src, "feature-ids.txt"), "--catalogue", CATALOGUE,
    "--images", path.join(src, "images"), "--levels", "32,128,320", "--tile-items", "300",
    "--title", "Demo archive, tiled (invented)", "--out", out], { encoding: "utf8" });
  manifest = JSON.parse(fs.readFileSync(path.join(out, "atlas.json"), "utf8"));
  server = spawn(BIN, ["serve", out, "--port", "0"], { stdio: ["ignore", "pipe", "inherit"] });
  url = await new Promise((resolve, reject) => {
    server.stdout.on("data", (d) => {
      const m = /at (http:\/\/127\.0\.0\.1:\d+\/)/.exec(d.toString());
      if (m) resolve(m[1]);
    });
    server.on("exit", (code) => reject(new Error(`vitrine serve exited with ${code}`)));
  });
  browser = await chromium.launch({ executablePath: process.env.CHROMIUM || "/usr/bin/chromium", args: FLAGS, headless: true });
});

after(async () => {
  if (browser) await browser.close();
  if (server) server.kill();
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

async function open() {
  const page = await browser.newPage({ viewport: { width: 1280, height: 800 } });
  const errors = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  await page.goto(url);
  await page.waitForFunction(() => document.body.dataset.state === "ready", null, { timeout: 60000 });
  return { page, errors };
}

const state = async (page) => JSON.parse(await page.evaluate(() => window.vitrineView.view_state()));

/** Waits until no tile, leaf or sheet is on its way, then draws once more. */
async function settle(page) {
  for (let k = 0; k < 100; k++) {
    await page.waitForTimeout(100);
    const busy = await page.evaluate(() => {
      const s = JSON.parse(window.vitrineView.view_state());
      return s.fetching + s.tiles_fetching;
    });
    if (busy === 0) break;
  }
  await page.evaluate(() => window.vitrineView.zoom_view(1.0));
}

/** Canvas pixels that are not the paper colour. */
async function inked(page, name) {
  const png = PNG.sync.read(await page.locator("#map").screenshot());
  fs.writeFileSync(path.join(ARTIFACTS, name), PNG.sync.write(png));
  const [r, g, b] = [png.data[0], png.data[1], png.data[2]];
  let n = 0;
  for (let i = 0; i < png.data.length; i += 4) {
    if (Math.abs(png.data[i] - r) + Math.abs(png.data[i + 1] - g) + Math.abs(png.data[i + 2] - b) > 24) n++;
  }
  return n;
}

/** Coloured pixels (the marks; the labels are grey) of the canvas's left part, clear of the
 * panels. */
async function colouredLeft(page, name) {
  const png = PNG.sync.read(await page.locator("#map").screenshot());
  fs.writeFileSync(path.join(ARTIFACTS, name), PNG.sync.write(png));
  const w = Math.floor(png.width * 0.6);
  let n = 0;
  for (let y = 0; y < png.height; y++) {
    for (let x = 0; x < w; x++) {
      const i = 4 * (y * png.width + x);
      const c = [png.data[i], png.data[i + 1], png.data[i + 2]];
      if (Math.max(...c) - Math.min(...c) > 24) n++;
    }
  }
  return n;
}

/** Tile `t`'s square's centre on the map. */
function centre(t) {
  const p = manifest.tiles.pyramid;
  const tile = p.tiles[t];
  const s = p.side / 2 ** tile.level;
  return [p.origin[0] + (tile.x + 0.5) * s, p.origin[1] + (tile.y + 0.5) * s];
}

/** Where the first item of leaf tile `t` lies, read from its chunk of positions on disk. */
function firstItem(t) {
  const leaf = manifest.tiles.pyramid.tiles.slice(0, t).filter((x) => !x.children).length;
  const file = manifest.maps.find((m) => m.name === "similarity").positions.file.replace(/\.bin$/, "");
  const b = fs.readFileSync(path.join(dir, "atlas", file, `${String(leaf).padStart(5, "0")}.bin`));
  return [b.readFloatLE(0), b.readFloatLE(4)];
}

/** The id of the first item of leaf tile `t`, read from its chunks of the ids on disk. */
function firstId(t) {
  const leaf = manifest.tiles.pyramid.tiles.slice(0, t).filter((x) => !x.children).length;
  const chunk = (r) => fs.readFileSync(path.join(dir, "atlas", r.file.replace(/\.bin$/, ""),
    `${String(leaf).padStart(5, "0")}.bin`));
  const offsets = chunk(manifest.ids);
  return chunk(manifest.ids_text).subarray(0, offsets.readUInt32LE(4)).toString("utf8");
}

test("a tiled atlas opens from its overview pictures and draws its leaves' items zoomed in", async () => {
  assert.equal(manifest.format_version, 3);
  const { page, errors } = await open();
  await settle(page);
  const fit = await state(page);
  assert.equal(fit.items, manifest.item_count);
  assert.ok(fit.overviews_drawn > 0, "the fitted view draws overview pictures");
  assert.ok(await page.evaluate(() => Number(document.body.dataset.firstFull) > 0), "a first full picture");
  assert.ok(await inked(page, "12-tiled-fit.png") > 20000, "the overview pictures show the marks");
  // Zoomed into a leaf, its items are drawn one by one, then as thumbnails.
  const leaf = manifest.tiles.pyramid.tiles.findIndex((t) => !t.children && t.count > 50);
  const [x, y] = centre(leaf);
  await page.evaluate(([x, y]) => window.vitrineView.look_at(x, y, 6), [x, y]);
  await settle(page);
  let s = await state(page);
  assert.ok(s.marks + s.thumbnails > 50, `items drawn: ${s.marks} marks, ${s.thumbnails} thumbnails`);
  assert.ok(s.leaves_here > 0);
  const [ix, iy] = firstItem(leaf);
  await page.evaluate(([x, y]) => window.vitrineView.look_at(x, y, 60), [ix, iy]);
  await settle(page);
  s = await state(page);
  assert.ok(s.thumbnails > 0, `thumbnails at 60 times the fitted zoom: ${JSON.stringify(s)}`);
  assert.ok(await inked(page, "12-tiled-zoomed.png") > 20000);
  // A click on the item at the centre opens its record card: its leaf's records are fetched and
  // the card shows the id the leaf's chunk of ids holds on disk.
  const box = await page.locator("#map").boundingBox();
  await page.mouse.click(box.x + box.width / 2, box.y + box.height / 2);
  const id = firstId(leaf);
  await page.waitForFunction((id) => (document.getElementById("card")?.innerText || "").includes(id), id,
    { timeout: 30000 });
  await page.screenshot({ path: path.join(ARTIFACTS, "12-tiled-card.png") });
  assert.deepEqual(errors, []);
  await page.close();
});

test("filters on the tiled atlas fetch their columns and pass the same items as on the untiled atlas", async () => {
  // The untiled demo atlas of the same archive, answered by `vitrine corpus` (VITRINE_ATLAS).
  const whole = process.env.VITRINE_ATLAS;
  assert.ok(whole, "set VITRINE_ATLAS");
  const native = (...args) => Number(execFileSync(BIN, ["corpus", whole, ...args], { encoding: "utf8" }).split(" ")[0]);
  const { page, errors } = await open();
  await settle(page);
  const before = await colouredLeft(page, "13-tiled-unfiltered.png");
  const passing = () => page.evaluate(() => document.body.dataset.passing || "");
  await page.keyboard.press("c");
  // Opening a field's section fetches its column from every leaf; then its values and counts show.
  const technique = page.locator("#filter-panel details[data-field='technique']");
  await technique.locator("summary").click();
  await technique.locator("input[data-value='etching']").check({ timeout: 30000 });
  await page.waitForFunction(() => document.body.dataset.passing);
  assert.equal(Number(await passing()), native("--filter", "technique=etching"));
  const dating = page.locator("#filter-panel details[data-field='dating']");
  await dating.locator("summary").click();
  await dating.locator("input[aria-label=from]").fill("1500", { timeout: 30000 });
  await dating.locator("input[aria-label=to]").fill("1560");
  await dating.locator("select").selectOption("within");
  await dating.locator("button").click();
  await page.waitForFunction(() => document.body.dataset.filters === "2");
  const both = Number(await passing());
  assert.equal(both, native("--filter", "technique=etching", "--date", "1500..1560", "--date-rule", "within"));
  // Counts beside the values are cross-filtered over every item, loaded or not.
  const woodcut = Number(await technique.locator("label", { has: page.locator("input[data-value='woodcut']") })
    .locator(".n").innerText());
  assert.equal(woodcut, native("--filter", "technique=woodcut", "--date", "1500..1560", "--date-rule", "within"));
  // The overview pictures are drawn again with what the filters leave out dimmed.
  await page.keyboard.press("c");
  await page.waitForFunction(() => document.body.dataset.columns === "ready", null, { timeout: 30000 });
  await settle(page);
  const after = await colouredLeft(page, "13-tiled-filtered.png");
  assert.ok(after < before * 0.5, `coloured pixels ${before} before the filters, ${after} after`);
  assert.deepEqual(errors, []);
  await page.close();
});

test("a lasso on the tiled atlas selects the same items as on the untiled atlas", async () => {
  // The outlines the page applied (in map coordinates, as its corpus file holds them) replayed by
  // `vitrine corpus` on the untiled demo atlas of the same archive (one map, the same places).
  const whole = process.env.VITRINE_ATLAS;
  assert.ok(whole, "set VITRINE_ATLAS");
  const outline = [];
  for (let k = 0; k < 60; k++) {
    const a = (k / 60) * 2 * Math.PI;
    const r = 260 * (1 + 0.25 * Math.sin(5 * a));
    outline.push(600 + r * Math.cos(a), 420 + r * Math.sin(a));
  }
  const { page, errors } = await open();
  await settle(page);
  await page.evaluate((pts) => window.vitrineView.select_lasso(pts, "replace"), outline);
  await page.waitForFunction(() => document.body.dataset.selected && !document.body.dataset.selecting,
    null, { timeout: 30000 });
  await page.evaluate((pts) => window.vitrineView.select_lasso(pts.map((v) => v * 0.8), "subtract"), outline);
  await page.waitForFunction(() => JSON.parse(window.vitrineView.view_state()).steps.length === 2 &&
    !document.body.dataset.selecting, null, { timeout: 30000 });
  const selected = Number(await page.evaluate(() => document.body.dataset.selected));
  // What is not selected fades in the overview pictures too, once the items' cells are here.
  await page.waitForFunction(() => document.body.dataset.columns === "ready", null, { timeout: 30000 });
  await settle(page);
  const s = await state(page);
  await page.screenshot({ path: path.join(ARTIFACTS, "13-tiled-lasso.png") });
  // Leaves wholly inside are taken whole: not every leaf was fetched.
  const leaves = manifest.tiles.pyramid.tiles.filter((t) => !t.children).length;
  assert.ok(s.leaves_here < leaves, `${s.leaves_here} of ${leaves} leaves here after the lasso`);
  assert.deepEqual(s.steps.map((x) => x.op), ["replace", "subtract"]);
  const text = (step) => step.lasso.map((p) => p.join(",")).join(" ");
  const native = Number(execFileSync(BIN, ["corpus", whole, "--lasso", text(s.steps[0]),
    "--subtract-lasso", text(s.steps[1])], { encoding: "utf8" }).split(" ")[0]);
  assert.ok(native > 100, `${native} selected on the untiled atlas`);
  assert.equal(selected, native);
  assert.deepEqual(errors, []);
  await page.close();
});

test("a tile that cannot be loaded leaves a note and the rest of the map works", async () => {
  // An overview picture the fitted view draws, and the positions of one leaf, are removed.
  const out = path.join(dir, "atlas");
  const fitted = await (async () => {
    const { page } = await open();
    await settle(page);
    const s = await state(page);
    await page.close();
    return s.overview_tiles;
  })();
  const gone = fitted.find((t) => t !== 0);
  fs.rmSync(path.join(out, "tiles", `${String(gone).padStart(5, "0")}.png`));
  const leaves = manifest.tiles.pyramid.tiles.map((t, i) => [t, i]).filter(([t]) => !t.children);
  const [, leafTile] = leaves.find(([t]) => t.count > 50);
  const leafIndex = leaves.findIndex(([, i]) => i === leafTile);
  const positions = manifest.maps.find((m) => m.name === "similarity").positions.file.replace(/\.bin$/, "");
  fs.rmSync(path.join(out, positions, `${String(leafIndex).padStart(5, "0")}.bin`));

  const { page } = await open();
  await settle(page);
  await page.waitForFunction(() => Number(document.body.dataset.tilesFailed) > 0, null, { timeout: 20000 });
  const note = page.locator("#map-note");
  assert.ok(await note.isVisible(), "the note is shown");
  assert.match(await note.textContent(), /could not be loaded/);
  assert.ok(await inked(page, "12-tiled-missing-tile.png") > 20000, "the rest of the map is drawn");
  // The leaf without its positions: its part stays a picture, the note says so; elsewhere items.
  const [x, y] = centre(leafTile);
  await page.evaluate(([x, y]) => window.vitrineView.look_at(x, y, 6), [x, y]);
  await settle(page);
  await page.waitForFunction(() => Number(document.body.dataset.tilesFailed) > 0, null, { timeout: 20000 });
  const s = await state(page);
  assert.ok(s.leaves_failed >= 1);
  const other = leaves.find(([t], k) => k !== leafIndex && t.count > 50)[1];
  const [ox, oy] = centre(other);
  await page.evaluate(([x, y]) => window.vitrineView.look_at(x, y, 6), [ox, oy]);
  await settle(page);
  const t = await state(page);
  assert.ok(t.marks + t.thumbnails > 50, "another leaf's items are drawn");
  await page.close();
});
