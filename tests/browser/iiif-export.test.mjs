// The IIIF export of a corpus, read by an IIIF Presentation 3 parser from npm (@iiif/parser):
// its strict pass raises no warning, and normalising keeps the Manifest's id, one Canvas per
// corpus item in corpus order, and their labels.
import { test } from "node:test";
import assert from "node:assert/strict";
import { execFileSync } from "node:child_process";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { normalize } from "@iiif/parser";
import { presentation3StrictUpgrade } from "@iiif/parser/strict";

const BIN = process.env.VITRINE_BIN;
const ATLAS = process.env.VITRINE_ATLAS;

test("a corpus exported as IIIF parses and validates as Presentation 3", () => {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), "vitrine-iiif-"));
  const base = "https://corpus.example/demo-etchings/";
  const out = execFileSync(BIN, ["corpus", ATLAS, "--filter", "technique=etching", "--date", "1500..1600",
    "--iiif", path.join(dir, "manifest.json"), "--json", path.join(dir, "corpus.json"),
    "--csv", path.join(dir, "corpus.csv"), "--base-url", base], { encoding: "utf8" });
  const corpus = JSON.parse(fs.readFileSync(path.join(dir, "corpus.json"), "utf8"));
  assert.ok(corpus.count > 10, out);
  const manifest = JSON.parse(fs.readFileSync(path.join(dir, "manifest.json"), "utf8"));

  const state = { warnings: [] };
  presentation3StrictUpgrade(structuredClone(manifest), state);
  assert.deepEqual(state.warnings, [], "the strict Presentation 3 pass found problems");
  // Control: the same pass does object to a label that is not a language map.
  const control = { warnings: [] };
  presentation3StrictUpgrade({ ...structuredClone(manifest), label: "plain text" }, control);
  assert.ok(control.warnings.some((w) => w.includes("label")), JSON.stringify(control.warnings));

  const { entities, resource } = normalize(manifest);
  assert.equal(resource.id, `${base}manifest.json`);
  const m = entities.Manifest[resource.id];
  assert.equal(m.type, "Manifest");
  assert.equal(m.items.length, corpus.count, "one Canvas per corpus item");
  assert.equal(Object.keys(entities.Canvas).length, corpus.count);
  // Canvas k is corpus item k: its metadata names the id, its label is the record's title.
  const titles = new Map();
  const csvRows = fs.readFileSync(path.join(dir, "corpus.csv"), "utf8").split("\r\n").slice(1, -1);
  assert.equal(csvRows.length, corpus.count);
  m.items.forEach((ref, k) => {
    const c = entities.Canvas[ref.id];
    assert.equal(c.type, "Canvas");
    assert.ok(c.width > 0 && c.height > 0);
    const id = c.metadata.find((e) => e.label.none[0] === "id").value.none[0];
    assert.equal(id, corpus.ids[k]);
    const title = c.metadata.find((e) => e.label.none[0] === "title").value.none[0];
    assert.deepEqual(c.label, { none: [title] });
    titles.set(id, title);
    assert.ok(c.homepage.length === 1, "the record page is the canvas's homepage");
  });
  assert.equal(titles.size, corpus.count, "canvas ids and labels are distinct per item");
});
