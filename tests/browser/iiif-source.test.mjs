// An atlas built from an IIIF Collection (`vitrine build --iiif`, served on 127.0.0.1 by
// tests/iiif/serve.py), its corpus exported as IIIF and read by an IIIF Presentation 3 parser from
// npm (@iiif/parser): the strict pass raises no warning, and each Canvas carries its source's
// Image API service (type and profile, so that viewers deep-zoom), rights and required statement.
import { test } from "node:test";
import assert from "node:assert/strict";
import { execFileSync, spawn } from "node:child_process";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import readline from "node:readline";
import { fileURLToPath } from "node:url";
import { normalize } from "@iiif/parser";
import { presentation3StrictUpgrade } from "@iiif/parser/strict";

const BIN = process.env.VITRINE_BIN;
const PYTHON = process.env.VITRINE_PYTHON ?? path.join(os.homedir(), ".cache/vitrine/venv/bin/python");
const HERE = path.dirname(fileURLToPath(import.meta.url));

async function serve() {
  const child = spawn(PYTHON, [path.join(HERE, "../iiif/serve.py")], { stdio: ["ignore", "pipe", "inherit"] });
  const lines = readline.createInterface({ input: child.stdout });
  const port = await new Promise((resolve) => lines.once("line", resolve));
  return { child, base: `http://127.0.0.1:${port.trim()}` };
}

test("a corpus of an IIIF-sourced atlas exports Canvases with their Image API services", async () => {
  const server = await serve();
  try {
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), "vitrine-iiif-source-"));
    execFileSync(BIN, ["build", "--quiet", "--epochs", "30", "--levels", "32,64",
      "--iiif", `${server.base}/collection.json`, "--iiif-cache", path.join(dir, "cache"),
      "--no-thumb-cache", "--out", path.join(dir, "atlas")], { encoding: "utf8" });
    const base = "https://corpus.example/iiif-sourced/";
    execFileSync(BIN, ["corpus", path.join(dir, "atlas"), "--iiif", path.join(dir, "manifest.json"),
      "--base-url", base], { encoding: "utf8" });
    const manifest = JSON.parse(fs.readFileSync(path.join(dir, "manifest.json"), "utf8"));

    const state = { warnings: [] };
    presentation3StrictUpgrade(structuredClone(manifest), state);
    assert.deepEqual(state.warnings, [], "the strict Presentation 3 pass found problems");

    const { entities, resource } = normalize(structuredClone(manifest));
    const m = entities.Manifest[resource.id];
    assert.equal(m.items.length, 18, "one Canvas per IIIF Canvas of the source");
    const byTitle = new Map();
    for (const ref of m.items) {
      const c = entities.Canvas[ref.id];
      const title = c.metadata.find((e) => e.label.none[0] === "title").value.none[0];
      byTitle.set(title, c);
    }
    // A 3.0 source: ImageService3 with its profile, the Manifest's rights and statement.
    const a = byTitle.get("Harbour view 1");
    assert.deepEqual([a.width, a.height], [1200, 800], "the Canvas has the master's size");
    const page = entities.AnnotationPage[a.items[0].id];
    const anno = entities.Annotation[page.items[0].id];
    const body = entities.ContentResource[anno.body[0].id];
    assert.equal(body.id, `${server.base}/img3/a0/full/max/0/default.jpg`);
    const service = body.service[0];
    assert.equal(service.id ?? service["@id"], `${server.base}/img3/a0`);
    assert.equal(service.type ?? service["@type"], "ImageService3");
    assert.equal(service.profile, "level2");
    assert.equal(a.rights, "http://creativecommons.org/licenses/by/4.0/");
    assert.deepEqual(a.requiredStatement.label, { none: ["Attribution"] });
    assert.deepEqual(a.requiredStatement.value, { none: ["Fictional Photo Archive of Korvenstadt"] });
    // A 2.1 source: ImageService2, written with @id and @type as Presentation 3 asks.
    const raw = manifest.items.find((c) => c.label.none[0] === "Workshop interior 1");
    const s2 = raw.items[0].items[0].body.service[0];
    assert.deepEqual(s2, { "@id": `${server.base}/img2/b0`, "@type": "ImageService2",
      profile: "http://iiif.io/api/image/2/level2.json" });
    // A level 1 service gets no fitted-size thumbnail (it could not serve one).
    const l1 = manifest.items.find((c) => c.label.none[0] === "Level 1 view");
    assert.equal(l1.items[0].items[0].body.service[0].profile, "level1");
    assert.equal(l1.thumbnail, undefined);
    assert.equal(raw.items[0].items[0].body.id, `${server.base}/img2/b0/full/full/0/default.jpg`);
  } finally {
    server.child.kill();
  }
});
