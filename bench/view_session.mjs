// The viewer benchmark's scripted session: node bench/view_session.mjs URL [swiftshader|gl-egl]
// Opens the atlas at URL in Debian's headless Chromium at 1280x800 with software WebGL, then: load,
// fit, zoom in three steps down to single thumbnails, panning back and forth at each level. Every
// step is drawn at once and read back (a pixel copied out of the canvas), and timed in the page.
// Prints one JSON line: time to first full picture, per-phase median and 95th-percentile frame
// times, bytes fetched and the tab's memory (JS heap + wasm memory).
import { createRequire } from "node:module";
import path from "node:path";
import fs from "node:fs";
import os from "node:os";

const require = createRequire(path.resolve("tests/browser/package.json"));
const { chromium } = require("playwright-core");

const [url, angle = "swiftshader"] = process.argv.slice(2);
const FLAGS = [
  "--no-sandbox", `--use-angle=${angle}`, "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist",
  "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run",
  "--disable-quic", "--enable-precise-memory-info",
];

const quantile = (xs, q) => {
  const s = [...xs].sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.floor(q * s.length))];
};

const profile = fs.mkdtempSync(path.join(os.tmpdir(), "vitrine-bench-view-"));
const browser = await chromium.launchPersistentContext(profile, {
  executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
  args: FLAGS,
  headless: true,
  viewport: { width: 1280, height: 800 },
});
try {
  const page = browser.pages()[0] || (await browser.newPage());
  const errors = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  page.on("crash", () => console.error("[bench-view]   the page crashed"));
  page.on("console", (m) => { if (m.text().startsWith("filter ")) console.error(`[bench-view]     ${m.text()}`); });
  await page.addInitScript(() => performance.setResourceTimingBufferSize(1000000));
  await page.goto(url);
  await page.waitForFunction(() => document.body.dataset.firstFull || document.body.dataset.state === "error",
    null, { timeout: 600000, polling: 50 });
  if (await page.evaluate(() => document.body.dataset.state) === "error") {
    throw new Error(`the page reported an error: ${await page.locator("#message").textContent()} ${errors}`);
  }
  const firstFull = Number(await page.evaluate(() => document.body.dataset.firstFull));
  console.error(`[bench-view]   first full picture at ${firstFull} ms; waiting for the catalogue`);
  await page.waitForFunction(() => document.body.dataset.state === "ready", null, { timeout: 600000 });
  const readyMs = await page.evaluate(() => performance.now());
  const state = async () => JSON.parse(await page.evaluate(() => window.vitrineView.view_state()));
  const start = await state();

  // Runs `steps` in the page: each is [kind, a, b] (zoom factor or pan dx, dy), drawn at once and read
  // back; returns the milliseconds per step. Between steps the page gets a moment for fetches.
  const run = (steps) => page.evaluate(async (steps) => {
    const canvas = document.getElementById("map");
    const probe = new OffscreenCanvas(1, 1).getContext("2d", { willReadFrequently: true });
    const times = [];
    const raster = [];
    const handover = [];
    const whole = [];
    const work = [];
    const settled = [];
    for (const [kind, a, b] of steps) {
      const t0 = performance.now();
      if (kind === "zoom") window.vitrineView.zoom_view(a);
      else if (kind === "glide") window.vitrineView.glide_map_step(a, b);
      else if (kind === "filter") {
        window.vitrineView.set_filter(a);
        work.push(performance.now() - t0);
        window.vitrineView.zoom_view(1.0);
      } else if (kind === "lasso") {
        window.vitrineView.select_lasso(a, b);
        work.push(performance.now() - t0);
        window.vitrineView.zoom_view(1.0);
      } else window.vitrineView.pan_view(a, b);
      const read = () => {
        probe.drawImage(canvas, canvas.width / 2, canvas.height / 2, 1, 1, 0, 0, 1, 1);
        probe.getImageData(0, 0, 1, 1);
      };
      read();
      times.push(performance.now() - t0);
      if (kind === "filter" || kind === "lasso") {
        // A filter or lasso also changes the page around the map (filters row, counts, tray, timeline
        // strip): the step has settled once the browser has drawn two frames of the page after
        // it and the map reads back again. The next step starts only then, as a person's next
        // click would.
        await new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)));
        read();
        settled.push(performance.now() - t0);
      }
      const s = JSON.parse(window.vitrineView.view_state());
      raster.push(s.raster_ms);
      handover.push(s.present_ms);
      whole.push(s.render_ms);
      await new Promise((r) => setTimeout(r, 20));
    }
    return { times, raster, handover, whole, work, settled };
  }, steps);

  const phases = [];
  const phase = async (name, steps) => {
    console.error(`[bench-view]   ${name}`);
    const { times, raster, handover, whole, work, settled } = await run(steps);
    const s = await state();
    phases.push({
      phase: name, frames: times.length, median: quantile(times, 0.5), p95: quantile(times, 0.95),
      raster: quantile(raster, 0.5), handover: quantile(handover, 0.5), render: quantile(whole, 0.5),
      work: work.length ? quantile(work, 0.5) : null, work_max: work.length ? Math.max(...work) : null,
      settled: settled.length ? quantile(settled, 0.5) : null,
      drawn: `${s.marks} marks, ${s.thumbnails} thumbnails (${s.side_px.toFixed(1)} px)`,
    });
  };
  const pans = (dx) => [...Array(10).fill(["pan", dx, 0]), ...Array(10).fill(["pan", -dx, 0])];
  const zoomTo = (from, to) => Array(8).fill(["zoom", Math.pow(to / from, 1 / 8), 0]);

  await phase("fit (still, redrawn)", Array(10).fill(["zoom", 1.0, 0]));
  await phase("fit: pan", pans(80));
  // Three zoom steps about one record in the most crowded part of the map (centred at the fitted
  // zoom): item squares of ~8 px (marks), ~40 px (small thumbnails), ~300 px (one record).
  // A tiled atlas (the catalogue is not fetched whole yet): the zooms go about the centre of the
  // map, and the map has no other maps, filters or measures to time.
  const tiled = await page.evaluate(() => document.body.dataset.catalogue === "tiled");
  if (!tiled) {
    const crowded = await page.evaluate(() => window.vitrineView.crowded_item());
    await page.evaluate((id) => window.vitrineView.focus_item(id, 1.0), crowded);
  }
  let side = start.side_px;
  for (const [name, target] of [["marks", 8], ["small thumbnails", 40], ["single thumbnails", 300]]) {
    await phase(`zoom to ${name}`, zoomTo(side, target));
    side = target;
    await phase(`${name}: pan`, pans(120));
  }
  // The session's figures as one JSON line: phases, measures, what was fetched, memory.
  const report = async (measure) => {
    const end = await state();
    const cdp = await browser.newCDPSession(page);
    const heap = await cdp.send("Runtime.getHeapUsage");
    const fetched = await page.evaluate(() => {
      const e = performance.getEntriesByType("resource");
      return { bytes: e.reduce((s, r) => s + (r.encodedBodySize || 0), 0), requests: e.length };
    });
    const before = await page.evaluate(() => Number(document.body.dataset.firstFullBytes || 0));
    console.log(JSON.stringify({
      renderer: end.renderer, first_full_ms: firstFull, catalogue_ready_ms: readyMs, phases, measure,
      js_heap: heap.usedSize, wasm: end.wasm_bytes, bytes: fetched.bytes, requests: fetched.requests,
      first_full_bytes: before, sheets_loaded: end.sheets_loaded, errors,
    }));
  };
  if (tiled) {
    // A category filter over every item: the first fetches the field's column (and the items'
    // cells) from every leaf; later ones read the column here. Timed from the call to the second
    // frame of the page after the filters changed (the overview pictures dimmed again).
    const values = await page.evaluate(async () =>
      (await (await fetch("atlas.json")).json()).fields.find((f) => f.kind === "category").values);
    const field = await page.evaluate(async () =>
      (await (await fetch("atlas.json")).json()).fields.find((f) => f.kind === "category").name);
    const timeFilter = (f) => page.evaluate(async (f) => {
      const changes = () => Number(document.body.dataset.filterChanges || 0);
      const before = changes();
      const t0 = performance.now();
      window.vitrineView.set_filter(f);
      while (changes() === before) await new Promise((r) => setTimeout(r, 2));
      await new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)));
      const ms = performance.now() - t0;
      const s = JSON.parse(window.vitrineView.view_state());
      console.log(`filter ${ms.toFixed(0)} ms: pass + page ${document.body.dataset.filterMs} ms (${document.body.dataset.refreshMs}), last frame ${s.render_ms} ms`);
      return ms;
    }, JSON.stringify(f));
    console.error(`[bench-view]   category filter on ${field}: first use, then again`);
    const t0 = await page.evaluate(() => performance.now());
    const first = await timeFilter({ kind: "category", field, values: [values[0]] });
    // The overview pictures dimmed once the items' cells are here too.
    await page.waitForFunction(() => document.body.dataset.columns === "ready", null, { timeout: 600000, polling: 20 });
    await page.evaluate(() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r))));
    const dimmed = (await page.evaluate(() => performance.now())) - t0;
    const again = [];
    for (const v of [[values[1]], [values[0], values[2]], [values[3 % values.length]], [values[1], values[2]], [values[0]]]) {
      again.push(await timeFilter({ kind: "category", field, values: v }));
    }
    // Again at the fitted view, where the overview pictures in view are drawn again from every
    // item's cell.
    await page.evaluate(() => window.vitrineView.fit_view());
    await page.waitForTimeout(3000);
    const againFit = [];
    for (const v of [[values[2]], [values[0], values[1]], [values[3 % values.length]]]) {
      againFit.push(await timeFilter({ kind: "category", field, values: v }));
    }
    const passing = await page.evaluate(() => Number(document.body.dataset.passing || 0));
    // Lassos over every item at the fitted view (200 points): the leaves each outline crosses
    // are fetched (once), those wholly inside taken whole. Timed from the call until the
    // selection is counted and two frames of the page are drawn.
    await page.evaluate(() => window.vitrineView.clear_corpus());
    const timeLasso = (pts, op) => page.evaluate(async ([pts, op]) => {
      const t0 = performance.now();
      const before = window.vitrineView.view_state();
      window.vitrineView.select_lasso(pts, op);
      const steps = () => JSON.parse(window.vitrineView.view_state()).steps.length;
      const want = JSON.parse(before).steps.length + 1;
      while (document.body.dataset.selecting || steps() !== want) await new Promise((r) => setTimeout(r, 2));
      await new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)));
      return performance.now() - t0;
    }, [pts, op]);
    const ring = (r) => {
      const pts = [];
      for (let k = 0; k < 200; k++) {
        const a = (k / 200) * 2 * Math.PI;
        const rr = r * (1 + 0.25 * Math.sin(5 * a));
        pts.push(640 + rr * Math.cos(a), 400 + rr * Math.sin(a));
      }
      return pts;
    };
    console.error("[bench-view]   lassos over every item");
    const lassoFirst = await timeLasso(ring(300), "replace");
    const lassoAgain = [];
    for (const [r, op] of [[150, "subtract"], [200, "add"], [320, "replace"], [100, "subtract"], [250, "replace"]]) {
      lassoAgain.push(await timeLasso(ring(r), op));
    }
    const selected = await page.evaluate(() => Number(document.body.dataset.selected || 0));
    await report({ filter_first_ms: first, filter_dimmed_ms: dimmed, filter_again_ms: [quantile(again, 0.5), Math.max(...again)], filter_again_fit_ms: [quantile(againFit, 0.5), Math.max(...againFit)], passing, lasso_first_ms: lassoFirst, lasso_again_ms: [quantile(lassoAgain, 0.5), Math.max(...lassoAgain)], selected });
    await browser.close();
    fs.rmSync(profile, { recursive: true, force: true });
    process.exit(0);
  }
  // A map change at the fitted view: every item glides from the similarity map to the lattice
  // (half a second, 16 frames of about 33 ms on the glide's own clock), each frame drawn whole.
  await page.evaluate(() => window.vitrineView.fit_view());
  await phase("map change (glide)", Array.from({ length: 16 }, (_, k) => ["glide", "lattice", k * 33.3]));
  await page.evaluate(() => window.vitrineView.show_map("similarity"));
  // Corpus work at the fitted view: filters changed one after another (each recomputes every
  // item's passing and the cross-filtered counts' masks, then redraws), and lassos of 200 points.
  await page.evaluate(() => window.vitrineView.fit_view());
  // With the filter panel open, as when values are ticked in it: every filter change also
  // recounts each category field's values under the other filters (cross-filtering) and lists them.
  await page.focus("#map");
  await page.keyboard.press("c");
  await page.waitForFunction(() => !document.getElementById("filter-panel").hidden);
  const cat = (values) => ["filter", JSON.stringify({ kind: "category", field: "technique", values }), 0];
  await phase("filter: category", [cat(["etching"]), cat(["etching", "engraving"]), cat(["woodcut"]),
    cat(["drawing", "woodcut"]), cat(["etching"]), cat(["mezzotint"])]);
  const date = (from, to, rule) => ["filter", JSON.stringify({ kind: "date", field: "date", from, to, rule }), 0];
  await phase("filter: date range", [date(1500, 1560, "overlap"), date(1520, 1600, "within"),
    date(1450, 1700, "overlap"), date(1600, 1650, "within"), date(1480, 1520, "overlap"), date(1500, 1800, "overlap")]);
  const lasso = (r, op) => {
    const pts = [];
    for (let k = 0; k < 200; k++) {
      const a = (k / 200) * 2 * Math.PI;
      const rr = r * (1 + 0.25 * Math.sin(5 * a));
      pts.push(640 + rr * Math.cos(a), 400 + rr * Math.sin(a));
    }
    return ["lasso", pts, op];
  };
  await phase("lasso (200 points)", [lasso(300, "replace"), lasso(150, "subtract"), lasso(200, "add"),
    lasso(350, "replace"), lasso(100, "subtract"), lasso(250, "replace")]);
  // Search over every text and category field (ids, image names, techniques, places): the
  // first search folds a million texts once, later ones read the folded copy.
  const search = (query) => ["filter", JSON.stringify({ kind: "text", fields: [], query }), 0];
  await phase("filter: search", [search("varn"), search("osterlee 12"), search("etching"),
    search("r00042"), search("brisca 7"), search("scan-0038")]);
  // Measuring a corpus over the whole collection (the filters dropped, so every item is in it):
  // the coding view's next item (a value set, then Enter: timed from the key to the next frame of
  // the page), a time profile of a category field, and two corpora compared.
  await page.evaluate(() => window.vitrineView.clear_corpus());
  console.error("[bench-view]   measuring: coding view, time profile, comparison");
  const book = JSON.stringify({ variables: [
    { name: "framing", kind: "one", values: [{ value: "full length" }, { value: "half length" }, { value: "head only" }] },
    { name: "signed", kind: "yes-no" }] });
  const opened = await page.evaluate((b) => window.vitrineView.bench_coding(b, "bench"), book);
  if (!opened) throw new Error("the coding view did not open");
  const measuring = await page.evaluate(async () => {
    const key = (k) => window.dispatchEvent(new KeyboardEvent("keydown", { key: k }));
    const frame = () => new Promise((r) => requestAnimationFrame(() => r()));
    const next = [];
    for (let k = 0; k < 60; k++) {
      key(String(1 + (k % 3)));
      await frame();
      const t0 = performance.now();
      key("Enter");
      await frame();
      next.push(performance.now() - t0);
    }
    key("Escape");
    const profile = [];
    for (let k = 0; k < 5; k++) profile.push(window.vitrineView.bench_profile("field:technique", "25"));
    const compare = [];
    for (let k = 0; k < 5; k++) compare.push(window.vitrineView.bench_compare("technique", "etching", "woodcut"));
    // The hard cases: every item against a seventh of them (skewed sizes, the smaller inside the
    // larger), and the profile of the corpus and both kept corpora per 10 years (three large groups,
    // each item's weight spread over up to five periods).
    const compareHard = [];
    for (let k = 0; k < 5; k++) compareHard.push(window.vitrineView.bench_compare("technique", "*", "photograph"));
    const profileHard = [];
    for (let k = 0; k < 5; k++) profileHard.push(window.vitrineView.bench_profile("corpus", "10"));
    const items = Number(document.body.dataset.codes || 0);
    return { next, profile, compare, compareHard, profileHard, codes: items };
  });
  // The closest hundred to an item over every item, by the compressed vectors (fetched first; an
  // atlas built without them is left out of this figure).
  let closest = null, growing = null;
  await page.evaluate(() => window.vitrineView.load_vectors());
  await page.waitForFunction(() => ["ready", "failed"].includes(document.body.dataset.vectors), null, { timeout: 600000 });
  if (await page.evaluate(() => document.body.dataset.vectors) === "ready") {
    closest = await page.evaluate(() => {
      const n = JSON.parse(window.vitrineView.view_state()).items;
      const t = [];
      for (let k = 0; k < 7; k++) t.push(window.vitrineView.bench_closest(Math.floor((k + 0.5) * n / 7), 100));
      return t;
    });
    // A round of growing: three examples against 200 background items, trained, every item
    // scored, the best candidates found.
    growing = await page.evaluate(() => [1, 2, 3, 4, 5].map(() => window.vitrineView.bench_grow(3)));
  }
  // The hard case: a million items of 64 bytes (the default width; the bench atlas has fewer).
  const closestWide = await page.evaluate(() => {
    const t = [];
    for (let k = 0; k < 5; k++) t.push(window.vitrineView.bench_closest_synthetic(1000000, 64, 100));
    return t;
  });
  const measure = {
    closest: closest && [quantile(closest, 0.5), Math.max(...closest)],
    growing: growing && [quantile(growing, 0.5), Math.max(...growing)],
    closest_wide: [quantile(closestWide, 0.5), Math.max(...closestWide)],
    coding_next: [quantile(measuring.next, 0.5), quantile(measuring.next, 0.95)],
    profile: [quantile(measuring.profile, 0.5), Math.max(...measuring.profile)],
    compare: [quantile(measuring.compare, 0.5), Math.max(...measuring.compare)],
    profile_hard: [quantile(measuring.profileHard, 0.5), Math.max(...measuring.profileHard)],
    compare_hard: [quantile(measuring.compareHard, 0.5), Math.max(...measuring.compareHard)],
  };
  await report(measure);
} finally {
  await browser.close();
  fs.rmSync(profile, { recursive: true, force: true });
}
