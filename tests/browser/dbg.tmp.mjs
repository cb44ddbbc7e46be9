import { chromium } from "playwright-core";
const b = await chromium.launch({ executablePath: "/usr/bin/chromium", args: ["--no-sandbox", "--use-angle=swiftshader", "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist"], headless: true });
const p = await b.newPage({ viewport: { width: 1280, height: 800 } });
p.on("console", (m) => console.log("console", m.type(), m.text().slice(0, 300)));
const t0 = Date.now();
p.on("requestfinished", (r) => console.log(((Date.now() - t0) / 1000).toFixed(1), "done", r.url().slice(-40)));
p.on("requestfailed", (r) => console.log(((Date.now() - t0) / 1000).toFixed(1), "FAILED", r.url().slice(-40), r.failure()?.errorText));
await p.goto(process.argv[2]);
for (let i = 0; i < 10; i++) { await new Promise((r) => setTimeout(r, 3000)); console.log(((Date.now() - t0) / 1000).toFixed(1), await p.evaluate(() => JSON.stringify(document.body.dataset) + " | " + (document.getElementById("loading")?.innerText || "").replace(/\s+/g, " "))); if (await p.evaluate(() => document.body.dataset.state === "ready")) break; }
await b.close();
