// What a frame costs the browser before the viewer draws anything: plain WebGL2 in the same headless
// Chromium, 1280x800, each frame read back as bench-view reads them (one pixel copied out of the
// canvas). Three ways of showing a finished 1280x800 RGBA frame:
//   read-back only: clear the canvas (the cost of reading a frame back at all);
//   upload + draw: texSubImage2D of the frame, one full-screen triangle straight into the canvas;
//   upload + draw + blit: the same triangle into an offscreen texture, then blitFramebuffer (with a
//     vertical flip) into the canvas, which is how wgpu's WebGL2 surface presents every frame.
// Usage: node bench/webgl_floor.mjs [swiftshader|gl-egl]; prints one JSON line of median ms.
import { createRequire } from "node:module";
import path from "node:path";

const require = createRequire(path.resolve("tests/browser/package.json"));
const { chromium } = require("playwright-core");

const angle = process.argv[2] || "swiftshader";
const browser = await chromium.launch({
  executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
  headless: true,
  args: ["--no-sandbox", `--use-angle=${angle}`, "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist",
    "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run"],
});
try {
  const page = await browser.newPage({ viewport: { width: 1280, height: 800 } });
  await page.setContent('<body style="margin:0"><canvas id="c" width="1280" height="800"></canvas></body>');
  const result = await page.evaluate(async () => {
    const W = 1280, H = 800, FRAMES = 40;
    const run = async (mode) => {
      const old = document.getElementById("c");
      const c = document.createElement("canvas");
      c.width = W; c.height = H; c.id = "c"; c.style.cssText = "width:1280px;height:800px;display:block";
      old.replaceWith(c);
      // The context options wgpu asks for.
      const gl = c.getContext("webgl2", { antialias: false });
      const shader = (type, src) => {
        const s = gl.createShader(type); gl.shaderSource(s, src); gl.compileShader(s); return s;
      };
      const prog = gl.createProgram();
      gl.attachShader(prog, shader(gl.VERTEX_SHADER, `#version 300 es
        void main() { gl_Position = vec4(float((gl_VertexID & 1) * 4 - 1), float((gl_VertexID >> 1) * 4 - 1), 0, 1); }`));
      gl.attachShader(prog, shader(gl.FRAGMENT_SHADER, `#version 300 es
        precision highp float; uniform highp sampler2D t; out vec4 o;
        void main() { o = texelFetch(t, ivec2(gl_FragCoord.xy), 0); }`));
      gl.linkProgram(prog);
      const texture = (w, h) => {
        const t = gl.createTexture(); gl.bindTexture(gl.TEXTURE_2D, t); gl.texStorage2D(gl.TEXTURE_2D, 1, gl.RGBA8, w, h);
        gl.texParameteri(gl.TEXTURE_2D, gl.TEXTURE_MIN_FILTER, gl.NEAREST);
        gl.texParameteri(gl.TEXTURE_2D, gl.TEXTURE_MAG_FILTER, gl.NEAREST);
        return t;
      };
      const frame = texture(W, H);
      let fbo = null;
      if (mode === "blit") {
        const target = texture(W, H);
        fbo = gl.createFramebuffer(); gl.bindFramebuffer(gl.FRAMEBUFFER, fbo);
        gl.framebufferTexture2D(gl.FRAMEBUFFER, gl.COLOR_ATTACHMENT0, gl.TEXTURE_2D, target, 0);
      }
      const pixels = new Uint8Array(W * H * 4);
      const probe = new OffscreenCanvas(1, 1).getContext("2d", { willReadFrequently: true });
      const times = [];
      for (let f = 0; f < FRAMES; f++) {
        for (let i = 0; i < pixels.length; i += 4096) pixels[i] = f * 7 + i;
        const t0 = performance.now();
        if (mode === "clear") {
          gl.bindFramebuffer(gl.FRAMEBUFFER, null); gl.clearColor(f % 2, 0, 0, 1); gl.clear(gl.COLOR_BUFFER_BIT);
        } else {
          gl.bindTexture(gl.TEXTURE_2D, frame);
          gl.texSubImage2D(gl.TEXTURE_2D, 0, 0, 0, W, H, gl.RGBA, gl.UNSIGNED_BYTE, pixels);
          gl.bindFramebuffer(gl.FRAMEBUFFER, fbo); gl.viewport(0, 0, W, H); gl.useProgram(prog);
          gl.drawArrays(gl.TRIANGLES, 0, 3);
          if (fbo) {
            gl.bindFramebuffer(gl.READ_FRAMEBUFFER, fbo); gl.bindFramebuffer(gl.DRAW_FRAMEBUFFER, null);
            gl.blitFramebuffer(0, H, W, 0, 0, 0, W, H, gl.COLOR_BUFFER_BIT, gl.NEAREST);
          }
        }
        probe.drawImage(c, W / 2, H / 2, 1, 1, 0, 0, 1, 1);
        probe.getImageData(0, 0, 1, 1);
        times.push(performance.now() - t0);
        await new Promise((r) => setTimeout(r, 20));
      }
      times.sort((a, b) => a - b);
      return times[Math.floor(FRAMES / 2)];
    };
    // Interleaved rounds; the median of the rounds' medians.
    const modes = { readback_only: "clear", upload_draw: "draw", upload_draw_blit: "blit" };
    const rounds = Object.fromEntries(Object.keys(modes).map((k) => [k, []]));
    for (let round = 0; round < 3; round++) {
      for (const [name, mode] of Object.entries(modes)) rounds[name].push(await run(mode));
    }
    return Object.fromEntries(Object.entries(rounds).map(([k, v]) => [k, v.sort((a, b) => a - b)[1]]));
  });
  console.log(JSON.stringify({ angle, ...result }));
} finally {
  await browser.close();
}
