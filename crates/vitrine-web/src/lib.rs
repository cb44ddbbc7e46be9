//! The browser layer: fetches the atlas, turns DOM events into camera moves and picks, puts the
//! record card on the page, and hands each finished frame to wgpu as one texture.
//!
//! Invariant: only this crate touches the DOM and the network; it holds no logic that the core
//! (`vitrine-view`) could hold and test without a browser.
#![cfg(target_arch = "wasm32")]

use std::cell::RefCell;
use std::collections::{HashMap, HashSet};
use std::rc::Rc;

use wasm_bindgen::prelude::*;
use wasm_bindgen::JsCast;
use wasm_bindgen_futures::JsFuture;
use web_sys::{Document, HtmlCanvasElement, HtmlElement};

use vitrine_corpus::corpus::{Op, Shape, Step};
use vitrine_view::atlas::AtlasData;
use vitrine_view::camera::Camera;
use vitrine_view::gpu::Presenter;
use vitrine_view::input::{Action, KeyPress};
use vitrine_view::present::Present;
use vitrine_view::raster::{self, Sheet};
use vitrine_view::sketch::Mode;
use vitrine_view::viewer::{Pointer, Viewer};

const MAX_FETCHES: usize = 4;
/// Lengths of the animated camera moves: a wheel step or key press, and a return to the whole map.
const ZOOM_GLIDE_MS: f64 = 160.0;
const FIT_GLIDE_MS: f64 = 280.0;
/// Items gliding from one map's places to another's.
const MAP_GLIDE_MS: f64 = 500.0;

struct Gpu {
    /// Kept for the page's life: WebGPU stops drawing once the instance is gone.
    _instance: wgpu::Instance,
    _adapter: wgpu::Adapter,
    surface: wgpu::Surface<'static>,
    device: wgpu::Device,
    queue: wgpu::Queue,
    config: wgpu::SurfaceConfiguration,
    presenter: Presenter,
    /// On WebGL2, the frame drawn straight into the canvas (None: through wgpu's surface).
    direct: Option<gl_present::DirectGl>,
    renderer: String,
    /// "WebGPU" or "WebGL2".
    backend: &'static str,
}

/// The page's viewer: the core's [`Viewer`] (everything it knows and decides) and what only a
/// page has — the canvas, the GPU, the fetches under way, the frame timing.
struct App {
    viewer: Viewer,
    canvas: HtmlCanvasElement,
    gpu: Gpu,
    pixels: Vec<u8>,
    frame_pending: bool,
    /// Something changed since the last frame was drawn (a frame drawn at once, as the script
    /// hooks zoom_view, pan_view and fit_view do, clears it, so the requested one is not drawn a
    /// second time).
    dirty: bool,
    fetching: HashSet<(usize, usize)>,
    /// Neighbour chunks being fetched.
    fetching_neighbours: HashSet<usize>,
    /// The last frame's milliseconds in the raster, in handing the frame to wgpu (the GPU's own
    /// work on it follows asynchronously) and in the whole of `render` (with labels and axis).
    frame_ms: [f64; 3],
    first_full: bool,
    /// The date histogram along the bottom (when the catalogue has a date field).
    timeline: Option<timeline_strip::Strip>,
    /// A tiled atlas: the checksum lists of the overview pictures and of the leaves' drawing
    /// arrays, and how many tile fetches are under way.
    tile_sums: vitrine_format::AtlasFiles,
    fetching_tiles: usize,
}

impl std::ops::Deref for App {
    type Target = Viewer;
    fn deref(&self) -> &Viewer {
        &self.viewer
    }
}

impl std::ops::DerefMut for App {
    fn deref_mut(&mut self) -> &mut Viewer {
        &mut self.viewer
    }
}

mod bulk;
mod coding;
mod columns;
mod filters;
mod gl_present;
mod grow;
mod measure;
mod select;
mod share;
mod store;
mod timeline_strip;
mod tray;
mod vectors;

thread_local! {
    static APP: RefCell<Option<Rc<RefCell<App>>>> = const { RefCell::new(None) };
}

fn app() -> Option<Rc<RefCell<App>>> {
    APP.with(|a| a.borrow().clone())
}

fn document() -> Document {
    web_sys::window().unwrap().document().unwrap()
}

fn by_id(id: &str) -> Option<HtmlElement> {
    document()
        .get_element_by_id(id)
        .and_then(|e| e.dyn_into::<HtmlElement>().ok())
}

fn set_state(key: &str, value: &str) {
    if let Some(body) = document().body() {
        let _ = body.dataset().set(key, value);
    }
}

/// Shows a message in place of the map (used when the atlas cannot be shown).
fn show_message(title: &str, text: &str) {
    if let Some(m) = by_id("message") {
        m.set_hidden(false);
        let doc = document();
        m.set_text_content(None);
        let h = doc.create_element("h2").unwrap();
        h.set_text_content(Some(title));
        let p = doc.create_element("p").unwrap();
        p.set_text_content(Some(text));
        let _ = m.append_child(&h);
        let _ = m.append_child(&p);
    }
    if let Some(l) = by_id("loading") {
        l.set_hidden(true);
    }
    set_state("state", "error");
}

fn progress(fraction: f64, text: &str) {
    if let Some(bar) = by_id("loading-bar") {
        let _ = bar
            .style()
            .set_property("width", &format!("{:.1}%", fraction * 100.0));
    }
    if let Some(t) = by_id("loading-text") {
        t.set_text_content(Some(text));
    }
}

async fn fetch_bytes(url: &str) -> Result<Vec<u8>, String> {
    fetched_bytes(url, web_sys::window().unwrap().fetch_with_str(url)).await
}

/// Fetches many files at once (the requests all start before the first is awaited).
async fn fetch_many(
    base: &str,
    files: &[(String, u64)],
) -> Result<vitrine_format::AtlasFiles, String> {
    fetched_many(start_fetches(base, files)?, files).await
}

/// Starts every request at once; each body is read as soon as its headers arrive: reading them one
/// after another would leave later bodies unread, and a host that writes responses in turn would
/// then wait on the page while the page waits on it.
fn start_fetches(base: &str, files: &[(String, u64)]) -> Result<js_sys::Promise, String> {
    let window = web_sys::window().ok_or("no window")?;
    let all = js_sys::Array::new();
    for (f, _) in files {
        let url = format!("{base}{f}");
        // The request starts here; its body is read by its own task as soon as it answers.
        let request = window.fetch_with_str(&url);
        all.push(&wasm_bindgen_futures::future_to_promise(async move {
            let resp: web_sys::Response = JsFuture::from(request).await?.dyn_into()?;
            if !resp.ok() {
                let e = js_sys::Error::new(&format!("{url}: HTTP {}", resp.status()));
                return Err(e.into());
            }
            JsFuture::from(resp.array_buffer()?).await
        }));
    }
    Ok(js_sys::Promise::all(&all))
}

async fn fetched_many(
    all: js_sys::Promise,
    files: &[(String, u64)],
) -> Result<vitrine_format::AtlasFiles, String> {
    let bodies = JsFuture::from(all).await.map_err(|e| {
        e.dyn_ref::<js_sys::Error>()
            .map(|e| String::from(e.message()))
            .unwrap_or_else(|| format!("{e:?}"))
    })?;
    let bodies = js_sys::Array::from(&bodies);
    let mut got = vitrine_format::AtlasFiles::new();
    for (i, (file, _)) in files.iter().enumerate() {
        got.insert(
            file.clone(),
            js_sys::Uint8Array::new(&bodies.get(i as u32)).to_vec(),
        );
    }
    Ok(got)
}

/// Resolves in a new task after the next animation frame (so that frame has been shown).
async fn after_next_frame() {
    let p = js_sys::Promise::new(&mut |resolve, _| {
        let later = Closure::once_into_js(move || {
            let _ = web_sys::window()
                .unwrap()
                .set_timeout_with_callback(resolve.unchecked_ref());
        });
        let _ = web_sys::window()
            .unwrap()
            .request_animation_frame(later.unchecked_ref());
    });
    let _ = JsFuture::from(p).await;
}

async fn fetched_bytes(url: &str, request: js_sys::Promise) -> Result<Vec<u8>, String> {
    let resp = JsFuture::from(request)
        .await
        .map_err(|e| format!("{url}: {e:?}"))?;
    let resp: web_sys::Response = resp
        .dyn_into()
        .map_err(|_| format!("{url}: not a response"))?;
    if !resp.ok() {
        return Err(format!("{url}: HTTP {}", resp.status()));
    }
    let buf = JsFuture::from(resp.array_buffer().map_err(|e| format!("{e:?}"))?)
        .await
        .map_err(|e| format!("{url}: {e:?}"))?;
    Ok(js_sys::Uint8Array::new(&buf).to_vec())
}

/// WebGPU where the browser offers an adapter for it, else WebGL2 (which every current browser
/// has, in software when there is no GPU). `?backend=webgl2` in the address asks for WebGL2.
async fn init_gpu(canvas: &HtmlCanvasElement) -> Result<Gpu, String> {
    let asked = web_sys::window()
        .and_then(|w| w.location().search().ok())
        .unwrap_or_default();
    let has_webgpu = web_sys::window()
        .map(|w| js_sys::Reflect::has(&w.navigator(), &"gpu".into()).unwrap_or(false))
        .unwrap_or(false);
    // The backends in the order they are tried; the first that gives a device draws.
    let mut tried = Vec::new();
    for backend in BACKENDS {
        let skip = match backend {
            Backend::WebGpu => !has_webgpu || asked.contains("backend=webgl2"),
            Backend::WebGl2 => false,
        };
        if skip {
            continue;
        }
        match init_backend(backend, canvas).await {
            Ok(gpu) => return Ok(gpu),
            Err(e) => {
                web_sys::console::info_1(&format!("{}: {e}", backend.name()).into());
                tried.push(format!("{}: {e}", backend.name()));
            }
        }
    }
    Err(format!("no way to draw here ({})", tried.join("; ")))
}

/// The ways of drawing into the canvas, best first: WebGPU where the browser offers an adapter,
/// else WebGL2, which every current browser has (on the processor when there is no GPU).
#[derive(Clone, Copy)]
enum Backend {
    WebGpu,
    WebGl2,
}

const BACKENDS: [Backend; 2] = [Backend::WebGpu, Backend::WebGl2];

impl Backend {
    fn name(self) -> &'static str {
        match self {
            Backend::WebGpu => "WebGPU",
            Backend::WebGl2 => "WebGL2",
        }
    }
}

async fn init_backend(backend: Backend, canvas: &HtmlCanvasElement) -> Result<Gpu, String> {
    match backend {
        Backend::WebGpu => {
            // The adapter is asked for before the canvas is touched: a canvas that has handed out
            // a WebGPU context can never give a WebGL2 one, which would end the fall-through.
            let instance = instance(wgpu::Backends::BROWSER_WEBGPU);
            let adapter = instance
                .request_adapter(&adapter_options(None))
                .await
                .map_err(|e| format!("no adapter ({e})"))?;
            let surface = instance
                .create_surface(wgpu::SurfaceTarget::Canvas(canvas.clone()))
                .map_err(|e| format!("no canvas context: {e}"))?;
            init_device(instance, surface, adapter, canvas, backend.name()).await
        }
        Backend::WebGl2 => {
            let instance = instance(wgpu::Backends::GL);
            let surface = instance
                .create_surface(wgpu::SurfaceTarget::Canvas(canvas.clone()))
                .map_err(|e| format!("this browser gives no WebGL2 context: {e}"))?;
            let adapter = instance
                .request_adapter(&adapter_options(Some(&surface)))
                .await
                .map_err(|e| format!("no graphics adapter: {e}"))?;
            init_device(instance, surface, adapter, canvas, backend.name()).await
        }
    }
}

fn instance(backends: wgpu::Backends) -> wgpu::Instance {
    let mut desc = wgpu::InstanceDescriptor::new_without_display_handle();
    desc.backends = backends;
    wgpu::Instance::new(desc)
}

fn adapter_options<'a>(
    surface: Option<&'a wgpu::Surface<'static>>,
) -> wgpu::RequestAdapterOptions<'a, 'static> {
    wgpu::RequestAdapterOptions {
        power_preference: wgpu::PowerPreference::LowPower,
        force_fallback_adapter: false,
        compatible_surface: surface,
        ..Default::default()
    }
}

async fn init_device(
    instance: wgpu::Instance,
    surface: wgpu::Surface<'static>,
    adapter: wgpu::Adapter,
    canvas: &HtmlCanvasElement,
    backend: &'static str,
) -> Result<Gpu, String> {
    let info = adapter.get_info();
    let (device, queue) = adapter
        .request_device(&wgpu::DeviceDescriptor {
            label: Some("vitrine"),
            required_limits: wgpu::Limits::downlevel_webgl2_defaults()
                .using_resolution(adapter.limits()),
            ..Default::default()
        })
        .await
        .map_err(|e| format!("no graphics device: {e}"))?;
    let caps = surface.get_capabilities(&adapter);
    let format = caps
        .formats
        .iter()
        .copied()
        .find(|f| !f.is_srgb())
        .unwrap_or(caps.formats[0]);
    let config = wgpu::SurfaceConfiguration {
        usage: wgpu::TextureUsages::RENDER_ATTACHMENT,
        format,
        color_space: Default::default(),
        width: canvas.width().max(1),
        height: canvas.height().max(1),
        present_mode: wgpu::PresentMode::Fifo,
        desired_maximum_frame_latency: 2,
        alpha_mode: caps.alpha_modes[0],
        view_formats: vec![],
    };
    surface.configure(&device, &config);
    let presenter = Presenter::new(&device, format);
    // On WebGL2 the frame goes straight into the canvas, unless `?present=surface` asks for
    // wgpu's surface (to compare the two).
    let surface_asked = web_sys::window()
        .and_then(|w| w.location().search().ok())
        .is_some_and(|q| q.contains("present=surface"));
    let direct = (backend == "WebGL2" && !surface_asked)
        .then(|| gl_present::DirectGl::new(&device))
        .flatten();
    let renderer = if info.name.is_empty() {
        backend.to_string()
    } else {
        format!("{} ({backend})", info.name)
    };
    Ok(Gpu {
        _instance: instance,
        _adapter: adapter,
        surface,
        device,
        queue,
        config,
        presenter,
        direct,
        renderer,
        backend,
    })
}

impl Gpu {
    fn resize(&mut self, w: u32, h: u32) {
        if self.config.width != w || self.config.height != h {
            self.config.width = w.max(1);
            self.config.height = h.max(1);
            self.surface.configure(&self.device, &self.config);
        }
    }
}

impl Present for Gpu {
    fn name(&self) -> &str {
        &self.renderer
    }

    fn present(&mut self, pixels: &[u8], w: u32, h: u32) {
        self.resize(w, h);
        if let Some(d) = self.direct.as_mut() {
            d.present(&self.device, pixels, w, h);
            return;
        }
        let frame = match self.surface.get_current_texture() {
            wgpu::CurrentSurfaceTexture::Success(t)
            | wgpu::CurrentSurfaceTexture::Suboptimal(t) => t,
            _ => {
                self.surface.configure(&self.device, &self.config);
                return;
            }
        };
        let view = frame.texture.create_view(&Default::default());
        self.presenter
            .draw(&self.device, &self.queue, pixels, w, h, &view);
        self.queue.present(frame);
    }
}

impl App {
    fn size(&self) -> (u32, u32) {
        (self.canvas.width().max(1), self.canvas.height().max(1))
    }

    fn render(&mut self) {
        let start = now();
        self.dirty = false;
        let (w, h) = self.size();
        let need = (w * h * 4) as usize;
        if self.pixels.len() != need {
            self.pixels = vec![0; need];
        }
        let mut pixels = std::mem::take(&mut self.pixels);
        let t0 = now();
        self.viewer.draw(&mut pixels, w as usize, h as usize);
        let t1 = now();
        self.gpu.present(&pixels, w, h);
        self.frame_ms = [t1 - t0, now() - t1, 0.0];
        self.pixels = pixels;
        set_state("frames", &self.frames.to_string());
        // A tiled atlas's view is whole once every picture it draws is its own and every leaf it
        // draws item by item is here.
        let tiles_whole = self.atlas.tiled.is_none()
            || (self.plan.want_tiles.is_empty()
                && self.plan.want_leaves.is_empty()
                && self.plan.draws.iter().all(|d| {
                    !matches!(d, vitrine_view::tiled::Draw::Overview { tile, from } if tile != from)
                })
                && !self.plan.draws.is_empty());
        if !self.first_full && self.last.wanted.is_empty() && tiles_whole {
            // The first frame with everything on screen drawn as it should be (for benchmarks).
            self.first_full = true;
            if let Some(perf) = web_sys::window().and_then(|w| w.performance()) {
                set_state("firstFull", &format!("{:.1}", perf.now()));
                // And what was fetched before it, for benchmarks.
                let bytes: f64 = perf
                    .get_entries_by_type("resource")
                    .iter()
                    .filter_map(|e| js_sys::Reflect::get(&e, &"encodedBodySize".into()).ok())
                    .filter_map(|v| v.as_f64())
                    .sum();
                set_state("firstFullBytes", &format!("{bytes:.0}"));
            }
        }
        self.update_axis();
        self.update_labels();
        self.update_links();
        if self.key_sketch.is_some() {
            select::show_key_sketch(self);
        }
        set_state(
            "level",
            if self.last.thumbnails > 0 {
                "thumbnails"
            } else {
                "marks"
            },
        );
        self.frame_ms[2] = now() - start;
    }

    /// The neighbour-graph links as lines over the map: of the record card's item (else of the
    /// item under the pointer), from it to each of its neighbours; with neither, of a selection of
    /// at most [`SELECTION_LINKS`] items, every link between two of its items. A neighbour's
    /// picture, at a line's end, opens its card. Lists not yet here are fetched.
    fn update_links(&mut self) {
        // (An SVG element: not an HtmlElement.)
        let Some(svg) = document().get_element_by_id("links") else {
            return;
        };
        let focus = self.open.or_else(|| under_pointer(self));
        // Drawn again only when what they join or where it is on screen changed.
        let key = (!self.map_gliding()).then(|| {
            let c = &self.camera;
            format!(
                "{focus:?} {} {} {} {} {:.4} {:.4} {:.6} {:?}",
                self.atlas.catalogue,
                self.selection.generation,
                self.tones_generation,
                self.atlas.current,
                c.centre[0],
                c.centre[1],
                c.zoom,
                c.size
            )
        });
        let same = key.is_some() && LINKS_DRAWN.with(|k| *k.borrow() == key);
        if same {
            return;
        }
        // The pairs to join, and whether every list they come from is here.
        let mut pairs: Vec<(usize, usize)> = Vec::new();
        // Copy links (drawn apart): from the focus to each of its copies (at most COPY_LINKS); or,
        // within a selection of at most SELECTION_LINKS items, from each selected copy to the
        // first selected member of its group.
        let mut copy_pairs: Vec<(usize, usize)> = Vec::new();
        let mut complete = true;
        let mut wanted = Vec::new();
        match focus {
            Some(i) => copy_pairs.extend(
                self.atlas
                    .copies
                    .group(i)
                    .iter()
                    .map(|&j| j as usize)
                    .filter(|&j| j != i && !hidden(self, j))
                    .take(COPY_LINKS)
                    .map(|j| (i, j)),
            ),
            None => {
                if let Some(m) = self.selection.mask() {
                    if m.count() <= SELECTION_LINKS {
                        for i in m.items() {
                            let first = self
                                .atlas
                                .copies
                                .group(i)
                                .iter()
                                .map(|&j| j as usize)
                                .find(|&j| m.get(j));
                            if let Some(f) = first.filter(|&f| f != i) {
                                copy_pairs.push((f, i));
                            }
                        }
                    }
                }
            }
        }
        let copy_set: HashSet<(usize, usize)> = copy_pairs
            .iter()
            .flat_map(|&(a, b)| [(a, b), (b, a)])
            .collect();
        match focus {
            Some(i) => match self.atlas.neighbours_of(i) {
                // (Neighbours the filters hide are left out: nothing shows at their end.)
                Some(nb) => {
                    pairs.extend(nb.into_iter().filter(|&j| !hidden(self, j)).map(|j| (i, j)))
                }
                None => complete = false,
            },
            None => {
                let items: Vec<usize> = self
                    .selection
                    .mask()
                    .map(|m| m.items().take(SELECTION_LINKS + 1).collect())
                    .unwrap_or_default();
                if items.len() <= SELECTION_LINKS {
                    let chosen: HashSet<usize> = items.iter().copied().collect();
                    for &i in &items {
                        match self.atlas.neighbours_of(i) {
                            Some(nb) => pairs.extend(
                                nb.into_iter()
                                    .filter(|j| {
                                        chosen.contains(j) && (i < *j || !self.links_to(*j, i))
                                    })
                                    .map(|j| (i, j)),
                            ),
                            None => {
                                complete = false;
                                wanted.push(i);
                            }
                        }
                    }
                }
            }
        }
        // A neighbour that is also a copy is drawn once, as a copy; in a tiled atlas, only
        // between items whose places are here.
        pairs.retain(|p| !copy_set.contains(p));
        pairs.retain(|&(i, j)| self.atlas.placed(i) && self.atlas.placed(j));
        copy_pairs.retain(|&(i, j)| self.atlas.placed(i) && self.atlas.placed(j));
        // Lists of the selection not yet here: fetched once this frame is over, then drawn.
        if !wanted.is_empty() {
            wasm_bindgen_futures::spawn_local(async move {
                for i in wanted {
                    fetch_neighbours(i);
                }
            });
        }
        svg.set_text_content(None);
        if pairs.is_empty() && copy_pairs.is_empty() {
            let _ = svg.set_attribute("hidden", "");
        } else {
            let css = css_per_px();
            let at = |k: usize| {
                let p = self.camera.to_screen(self.atlas.positions[k]);
                (p[0] * css, p[1] * css)
            };
            let doc = document();
            let ns = Some("http://www.w3.org/2000/svg");
            let lines = pairs
                .iter()
                .map(|p| (p, ""))
                .chain(copy_pairs.iter().map(|p| (p, "copy")));
            for (&(i, j), class) in lines {
                let ((x0, y0), (x1, y1)) = (at(i), at(j));
                if let Ok(l) = doc.create_element_ns(ns, "line") {
                    for (k, v) in [("x1", x0), ("y1", y0), ("x2", x1), ("y2", y1)] {
                        let _ = l.set_attribute(k, &format!("{v:.1}"));
                    }
                    if !class.is_empty() {
                        let _ = l.set_attribute("class", class);
                    }
                    let _ = svg.append_child(&l);
                }
            }
            let _ = svg.remove_attribute("hidden");
        }
        set_state("links", &pairs.len().to_string());
        set_state("copyLinks", &copy_pairs.len().to_string());
        // Kept only once every list was here (until then each frame looks again).
        if complete {
            LINKS_DRAWN.with(|k| *k.borrow_mut() = key);
        }
    }

    /// Whether item `j`'s neighbour list (if here) holds `i`: a link found from both ends is
    /// drawn once.
    fn links_to(&mut self, j: usize, i: usize) -> bool {
        self.atlas
            .neighbours_of(j)
            .is_some_and(|nb| nb.contains(&i))
    }

    /// Year ticks along the bottom for maps whose x axis is a quantity (the timeline map).
    fn update_axis(&self) {
        let Some(bar) = by_id("axis") else { return };
        let map = &self.atlas.maps[self.atlas.current];
        let Some(axis) = &map.axis else {
            bar.set_hidden(true);
            set_state("axis", "");
            return;
        };
        bar.set_hidden(false);
        set_state("axis", "on");
        bar.set_text_content(None);
        let doc = document();
        let css = css_per_px();
        let v = self.camera.visible(0.0);
        let label = doc.create_element("span").unwrap();
        label.set_class_name("label");
        label.set_text_content(Some(&axis.label));
        let _ = bar.append_child(&label);
        let mut ticks = vitrine_view::atlas::axis_ticks(axis, v[0], v[2]);
        if let Some(m) = axis.missing_at {
            if (m as f64) >= v[0] && (m as f64) <= v[2] {
                // Year ticks too close to the undated band's label give way to it.
                let ms = self.camera.to_screen([m, 0.0])[0] * css;
                ticks.retain(|(x, _)| {
                    (self.camera.to_screen([*x as f32, 0.0])[0] * css - ms).abs() > 45.0
                });
                ticks.push((m as f64, "undated".into()));
            }
        }
        for (x, text) in ticks {
            let sx = self.camera.to_screen([x as f32, 0.0])[0] * css;
            if sx < 60.0 {
                continue;
            }
            let t: HtmlElement = doc.create_element("span").unwrap().dyn_into().unwrap();
            t.set_text_content(Some(&text));
            let _ = t.style().set_property("left", &format!("{sx:.1}px"));
            let _ = bar.append_child(&t);
        }
    }

    /// Wall labels beside the larger clusters of the similarity map while it is zoomed out: small
    /// capitals joined to their group by a thin leader line, set where they cover no marks.
    fn update_labels(&self) {
        let Some(layer) = by_id("labels") else { return };
        layer.set_text_content(None);
        let map = &self.atlas.maps[self.atlas.current];
        if map.name != "similarity" || self.last.thumbnails > 0 {
            return;
        }
        let doc = document();
        let css = css_per_px();
        let metrics = vitrine_view::labels::LabelMetrics {
            char_px: 7.2 / css,
            height_px: 18.0 / css,
            reach_px: [18.0 / css, 40.0 / css, 70.0 / css],
        };
        let min_size = (self.atlas.n as u64 / 100).max(2);
        let labels = vitrine_view::labels::wall_labels(&self.viewer, metrics, 24, min_size);
        set_state("wallLabels", &labels.len().to_string());
        let svg_ns = Some("http://www.w3.org/2000/svg");
        let Ok(svg) = doc.create_element_ns(svg_ns, "svg") else {
            return;
        };
        let _ = svg.set_attribute("class", "leaders");
        for l in &labels {
            let (a, b) = vitrine_view::labels::leader(l);
            if let Ok(line) = doc.create_element_ns(svg_ns, "line") {
                for (k, v) in [("x1", a[0]), ("y1", a[1]), ("x2", b[0]), ("y2", b[1])] {
                    let _ = line.set_attribute(k, &format!("{:.1}", v * css));
                }
                let _ = svg.append_child(&line);
            }
            let t: HtmlElement = doc.create_element("span").unwrap().dyn_into().unwrap();
            t.set_text_content(Some(&l.text));
            let style = t.style();
            let _ = style.set_property("left", &format!("{:.1}px", l.rect[0] * css));
            let _ = style.set_property("top", &format!("{:.1}px", l.rect[1] * css));
            let _ = layer.append_child(&t);
        }
        let _ = layer.insert_before(&svg, layer.first_child().as_ref());
    }
}

fn request_frame() {
    let Some(app) = app() else { return };
    {
        let mut a = app.borrow_mut();
        a.dirty = true;
        if a.frame_pending {
            return;
        }
        a.frame_pending = true;
    }
    let cb = Closure::once_into_js(move || {
        // The coding view covers the map: it is drawn once the view closes (its sheets wait too).
        if coding::is_open() {
            if let Some(app) = self::app() {
                app.borrow_mut().frame_pending = false;
            }
            return;
        }
        if let Some(app) = self::app() {
            let (wanted, gliding) = {
                let mut a = app.borrow_mut();
                a.frame_pending = false;
                let moved = a.glide.is_some() || a.map_gliding();
                let t = now();
                let gliding = a.step_glide(t) | a.step_map_glide(t);
                // A frame drawn since the request (at once, by a caller) already shows it all.
                if a.dirty || moved {
                    a.render();
                }
                (a.last.wanted.clone(), gliding)
            };
            if gliding {
                // Sheets are fetched for where the view comes to rest, not for the views on the way.
                request_frame();
            } else {
                fetch_sheets(wanted);
            }
        }
    });
    let _ = web_sys::window()
        .unwrap()
        .request_animation_frame(cb.unchecked_ref());
}

fn now() -> f64 {
    web_sys::window()
        .and_then(|w| w.performance())
        .map(|p| p.now())
        .unwrap_or(0.0)
}

/// Milliseconds for a glide of this kind; none when the reader asked the system for less motion.
fn glide_ms(ms: f64) -> f64 {
    let reduce = web_sys::window()
        .and_then(|w| {
            w.match_media("(prefers-reduced-motion: reduce)")
                .ok()
                .flatten()
        })
        .map(|m| m.matches())
        .unwrap_or(false);
    if reduce {
        0.0
    } else {
        ms
    }
}

/// Moves the view to `to` in an animated glide from where it is now.
fn glide_to(to: Camera, ms: f64) {
    if let Some(app) = app() {
        app.borrow_mut().glide_to(to, now(), glide_ms(ms));
    }
    request_frame();
}

/// Tile fetches under way at most (overview pictures and leaves together).
const MAX_TILE_FETCHES: usize = 6;

/// A tiled atlas: starts fetching the overview pictures and leaves the last frame wanted, nearest
/// the centre first, a few at a time; says when parts of the map could not be loaded.
fn fetch_tiles() {
    let Some(app) = app() else { return };
    let (tiles, leaves, failed) = {
        let a = app.borrow();
        if a.atlas.tiled.is_none() {
            return;
        }
        (
            a.plan.want_tiles.clone(),
            a.plan.want_leaves.clone(),
            a.plan.failed,
        )
    };
    if let Some(note) = by_id("map-note") {
        note.set_hidden(failed == 0);
        if failed > 0 {
            note.set_text_content(Some(&format!(
                "{failed} part{} of the map in view could not be loaded: drawn from a coarser picture where \
                 there is one, else left blank. The rest of the map works; reloading the page tries again.",
                if failed == 1 { "" } else { "s" }
            )));
        }
        set_state("tilesFailed", &failed.to_string());
    }
    use vitrine_view::tiled::Fetch;
    let absent = |a: &App, tile: Option<usize>, leaf: Option<usize>| {
        a.atlas.tiled.as_ref().is_some_and(|x| {
            tile.is_none_or(|t| x.overview_state[t] == Fetch::Absent)
                && leaf.is_none_or(|l| x.leaf_state[l] == Fetch::Absent)
        })
    };
    for t in tiles {
        {
            let mut a = app.borrow_mut();
            if a.fetching_tiles >= MAX_TILE_FETCHES {
                return;
            }
            // The plan may be older than the last arrival: what is here or on its way is left.
            if !absent(&a, Some(t), None) {
                continue;
            }
            a.fetching_tiles += 1;
            a.fetching_tile(Some(t), None);
        }
        wasm_bindgen_futures::spawn_local(async move {
            let file = vitrine_format::tiles::overview_file(t);
            let bytes = fetch_bytes(&file).await;
            let Some(app) = self::app() else { return };
            let mut a = app.borrow_mut();
            a.fetching_tiles -= 1;
            let tiles = a.atlas.manifest.tiles.as_ref();
            let sums = tiles.map(|t| t.overview_sums.clone());
            let want = tiles.map_or(0, |t| t.overview_px);
            let read = bytes.and_then(|b| {
                let sums = sums.ok_or("no tiles")?;
                let list = a.tile_sums.bytes(&sums).map_err(|e| e.to_string())?;
                vitrine_format::tiles::verify_part(&file, list, t, &b)
                    .map_err(|e| e.to_string())?;
                // The picture's size from its header, before it is decoded.
                let png = image::ImageReader::with_format(
                    std::io::Cursor::new(&b),
                    image::ImageFormat::Png,
                );
                let dims = png.into_dimensions().map_err(|e| format!("{file}: {e}"))?;
                if dims != (want, want) {
                    return Err(format!(
                        "{file}: {} x {} pixels, not {want} x {want}",
                        dims.0, dims.1
                    ));
                }
                let img = image::load_from_memory_with_format(&b, image::ImageFormat::Png)
                    .map_err(|e| format!("{file}: {e}"))?
                    .to_rgba8();
                Ok(vitrine_view::tiled::Overview {
                    side: img.width() as usize,
                    rgba: img.into_raw(),
                })
            });
            match read {
                Ok(o) => a.insert_overview(t, o),
                Err(e) => {
                    web_sys::console::warn_1(&format!("map tile not loaded: {e}").into());
                    a.overview_failed(t);
                }
            }
            drop(a);
            request_frame();
        });
    }
    for leaf in leaves {
        {
            let a = app.borrow();
            if a.fetching_tiles >= MAX_TILE_FETCHES {
                return;
            }
            if !absent(&a, None, Some(leaf)) {
                continue;
            }
        }
        fetch_leaf(leaf);
    }
}

/// A tiled atlas: fetches the leaves `leaves` that are not here (and waits for those on their
/// way); returns how many could not be loaded.
pub async fn load_leaves(leaves: &[usize]) -> usize {
    for &l in leaves {
        fetch_leaf(l);
    }
    loop {
        let Some(app) = app() else { return 0 };
        let (pending, failed) = {
            let a = app.borrow();
            let Some(t) = a.atlas.tiled.as_ref() else {
                return 0;
            };
            use vitrine_view::tiled::Fetch;
            let state = |l: usize| t.leaf_state.get(l).copied().unwrap_or(Fetch::Failed);
            (
                leaves
                    .iter()
                    .filter(|&&l| matches!(state(l), Fetch::Absent | Fetch::Loading))
                    .count(),
                leaves
                    .iter()
                    .filter(|&&l| state(l) == Fetch::Failed)
                    .count(),
            )
        };
        if pending == 0 {
            return failed;
        }
        let p = js_sys::Promise::new(&mut |resolve, _| {
            let _ = web_sys::window()
                .unwrap()
                .set_timeout_with_callback_and_timeout_and_arguments_0(resolve.unchecked_ref(), 20);
        });
        let _ = JsFuture::from(p).await;
    }
}

/// Starts fetching leaf `leaf`'s drawing data unless it is here or on its way (for the view, or
/// for items shown elsewhere: the tray, a record card); once here, the map and the tray are drawn
/// again.
pub fn fetch_leaf(leaf: usize) {
    let Some(app) = app() else { return };
    let files = {
        let mut a = app.borrow_mut();
        let absent =
            a.atlas.tiled.as_ref().is_some_and(|x| {
                x.leaf_state.get(leaf) == Some(&vitrine_view::tiled::Fetch::Absent)
            });
        if !absent {
            return;
        }
        a.fetching_tiles += 1;
        a.fetching_tile(None, Some(leaf));
        let files: Vec<(String, u64)> = a
            .atlas
            .leaf_files(leaf)
            .into_iter()
            .map(|f| (f, 0))
            .collect();
        files
    };
    {
        wasm_bindgen_futures::spawn_local(async move {
            // Every chunk of the leaf at once.
            let got = fetch_many("", &files).await;
            let Some(app) = self::app() else { return };
            let mut guard = app.borrow_mut();
            let a = &mut *guard;
            a.fetching_tiles -= 1;
            let result = match got {
                Err(e) => {
                    a.viewer.leaf_failed(leaf);
                    Err(e)
                }
                Ok(held) => a
                    .viewer
                    .insert_leaf(leaf, &a.tile_sums, &held)
                    .map_err(|e| e.to_string()),
            };
            if let Err(e) = result {
                web_sys::console::warn_1(&format!("map tile not loaded: {e}").into());
            }
            drop(guard);
            request_frame();
            tray::schedule();
        });
    }
}

/// Starts fetching sheets that visible items want, a few at a time (and, in a tiled atlas, the
/// tiles the last frame wants).
fn fetch_sheets(wanted: Vec<(usize, usize)>) {
    fetch_tiles();
    let Some(app) = app() else { return };
    for (level, index) in wanted {
        let url = {
            let mut a = app.borrow_mut();
            if a.fetching.len() >= MAX_FETCHES || a.fetching.contains(&(level, index)) {
                continue;
            }
            a.fetching.insert((level, index));
            a.sheets.levels[level].files[index].clone()
        };
        wasm_bindgen_futures::spawn_local(async move {
            let result = fetch_bytes(&url).await.and_then(|bytes| {
                image::load_from_memory_with_format(&bytes, image::ImageFormat::Jpeg)
                    .map(|img| img.to_rgb8())
                    .map_err(|e| format!("{url}: {e}"))
            });
            let mut card = None;
            if let Some(app) = self::app() {
                let mut a = app.borrow_mut();
                a.fetching.remove(&(level, index));
                // The open record card waits for this sheet for its picture: show it again.
                let largest = a.sheets.levels.len().saturating_sub(1);
                card = a
                    .open
                    .filter(|&o| level == largest && a.sheets.sheet_of(largest, o) == index);
                match result {
                    Ok(img) => {
                        let frame = a.frames;
                        a.sheets.insert(
                            level,
                            index,
                            Sheet {
                                width: img.width(),
                                height: img.height(),
                                rgb: img.into_raw(),
                            },
                            frame,
                        );
                    }
                    Err(e) => web_sys::console::warn_1(&format!("sheet not loaded: {e}").into()),
                }
            }
            if card.is_some() {
                open_card(card);
            }
            coding::sheet_arrived(level, index);
            request_frame();
        });
    }
}

fn open_card(i: Option<usize>) {
    let Some(app) = app() else { return };
    app.borrow_mut().open_card(i);
    let Some(card) = by_id("card") else { return };
    let Some(i) = i else {
        // Focus that was in the card goes back to the map.
        let inside = document()
            .active_element()
            .is_some_and(|e| card.contains(Some(e.as_ref())));
        card.set_hidden(true);
        set_state("card", "");
        if inside {
            focus_map();
        }
        request_frame();
        return;
    };
    // A tiled atlas: the records of the item's leaf, if they are not here (the card is drawn
    // again when they are).
    if !app.borrow().atlas.has_record(i) {
        fetch_records(i);
    }
    // The neighbour list, if its chunk is here (else the chunk is fetched and the card redrawn).
    let nb = app.borrow_mut().atlas.neighbours_of(i);
    if nb.is_none() {
        fetch_neighbours(i);
    }
    // The card shows the largest thumbnail level: its sheet is fetched if it is not here yet.
    let want = {
        let a = app.borrow();
        let l = a.sheets.levels.len();
        (l > 0 && a.atlas.extents[i].0 > 0)
            .then(|| (l - 1, a.sheets.sheet_of(l - 1, i)))
            .filter(|&(l, s)| a.sheets.levels[l].loaded[s].is_none())
    };
    if let Some(w) = want {
        fetch_sheets(vec![w]);
    }
    let doc = document();
    // A card drawn again (its picture or neighbours arrived) keeps the keyboard's focus in it,
    // and a code being typed in it its text.
    let had_focus = doc
        .active_element()
        .is_some_and(|e| card.contains(Some(e.as_ref())));
    let same = !card.hidden()
        && document()
            .body()
            .and_then(|b| b.dataset().get("card"))
            .is_some_and(|id| id == app.borrow().atlas.id(i));
    let typing = same.then(|| coding::typing_in(&card)).flatten();
    // Emptied before the state is borrowed: taking out a code field fires its change event (not
    // a code when the same card is drawn again: its text is put back).
    if typing.is_some() {
        coding::empty_quietly(&card);
    } else {
        card.set_text_content(None);
    }
    let a = app.borrow();
    let close = doc.create_element("button").unwrap();
    close.set_class_name("close");
    close
        .set_attribute("aria-label", "Close the record card (Escape)")
        .unwrap();
    close.set_text_content(Some("×"));
    let cb = Closure::<dyn FnMut()>::new(|| open_card(None));
    close
        .add_event_listener_with_callback("click", cb.as_ref().unchecked_ref())
        .unwrap();
    cb.forget();
    let _ = card.append_child(&close);
    let title = doc.create_element("h2").unwrap();
    title.set_text_content(Some(&a.atlas.label(i)));
    let _ = card.append_child(&title);
    // The largest thumbnail level, if its sheet is loaded (else the best loaded one).
    if let Some(pic) = card_picture(&a, i) {
        let _ = card.append_child(&pic);
    }
    let dl = doc.create_element("dl").unwrap();
    for line in a.atlas.record(i) {
        let dt = doc.create_element("dt").unwrap();
        dt.set_text_content(Some(&line.name));
        let dd = doc.create_element("dd").unwrap();
        if line.link {
            let link: web_sys::HtmlAnchorElement =
                doc.create_element("a").unwrap().dyn_into().unwrap();
            link.set_href(&line.value);
            link.set_target("_blank");
            link.set_rel("noopener noreferrer");
            link.set_text_content(Some(&line.value));
            let _ = dd.append_child(&link);
        } else {
            dd.set_text_content(Some(if line.value.is_empty() {
                "—"
            } else {
                &line.value
            }));
        }
        let _ = dl.append_child(&dt);
        let _ = dl.append_child(&dd);
    }
    let _ = card.append_child(&dl);
    if a.atlas.manifest.vectors.is_some() {
        let _ = card.append_child(&grow::card_marks(i));
    }
    if let Some(codes) = coding::card_codes(&a, i) {
        let _ = card.append_child(&codes);
    }
    if let Some(s) = copies_section(&a, i) {
        let _ = card.append_child(&s);
    }
    let h = doc.create_element("h3").unwrap();
    h.set_text_content(Some("Nearest neighbours"));
    let _ = card.append_child(&h);
    if nb.is_none() {
        let p = doc.create_element("p").unwrap();
        p.set_class_name("pending");
        p.set_text_content(Some("loading…"));
        let _ = card.append_child(&p);
    }
    if let Some(nb) = nb {
        let ol = doc.create_element("ol").unwrap();
        ol.set_class_name("neighbours");
        for j in nb {
            let li = doc.create_element("li").unwrap();
            let b = doc.create_element("button").unwrap();
            b.set_text_content(Some(&a.atlas.label(j)));
            b.set_attribute("data-id", a.atlas.id(j)).unwrap();
            let cb = Closure::<dyn FnMut()>::new(move || open_card(Some(j)));
            b.add_event_listener_with_callback("click", cb.as_ref().unchecked_ref())
                .unwrap();
            cb.forget();
            let _ = li.append_child(&b);
            let _ = ol.append_child(&li);
        }
        let _ = card.append_child(&ol);
    }
    if let Some(s) = closest_section(&a, i) {
        let _ = card.append_child(&s);
    }
    card.set_hidden(false);
    set_state("card", a.atlas.id(i));
    drop(a);
    if let Some(t) = typing {
        coding::restore_typing(&card, t);
    } else if had_focus {
        focus_card();
    }
    request_frame();
}

/// The largest selection whose links the map shows.
const SELECTION_LINKS: usize = 500;
/// The most copy links drawn from one item (and copies listed in its record card).
const COPY_LINKS: usize = 200;

thread_local! {
    /// What the links on the map were last drawn for.
    static LINKS_DRAWN: RefCell<Option<String>> = const { RefCell::new(None) };
    /// Where the pointer last rested on the map (canvas pixels), while it is over it.
    static HOVER_AT: std::cell::Cell<Option<[f64; 2]>> = const { std::cell::Cell::new(None) };
}

/// The item under the pointer now (the view may have moved under a still pointer since the
/// hover was last told); none when the filters hide it.
fn under_pointer(a: &App) -> Option<usize> {
    HOVER_AT
        .with(|h| h.get())
        .and_then(|p| a.pick(p))
        .filter(|&i| !hidden(a, i))
}

/// Whether the filters hide item `i` ("hide the rest" on, the item not passing).
fn hidden(a: &App, i: usize) -> bool {
    a.filters.hide && a.filters.passing().is_some_and(|m| !m.get(i))
}

/// The record card's list of item `i`'s copies (the other members of its group: pictures that
/// open their cards), and a button that adds the whole group to the corpus; None when it has none.
fn copies_section(a: &App, i: usize) -> Option<web_sys::Element> {
    let group: Vec<usize> = a
        .atlas
        .copies
        .group(i)
        .iter()
        .map(|&j| j as usize)
        .collect();
    if group.is_empty() {
        return None;
    }
    let sec = coding::el("section", "copies", "");
    let others = group.len() - 1;
    let _ = sec.append_child(&coding::el(
        "h3",
        "",
        &format!(
            "Copies of this picture ({others} other{})",
            if others == 1 { "" } else { "s" }
        ),
    ));
    let copies = group.iter().copied().filter(|&j| j != i).take(COPY_LINKS);
    let _ = sec.append_child(&picture_strip(a, copies, "closest-strip copies-strip"));
    if others > COPY_LINKS {
        let _ = sec.append_child(&coding::el(
            "p",
            "how",
            &format!("and {} more", others - COPY_LINKS),
        ));
    }
    // Only what the filters let through can be in the corpus.
    let passing: Vec<usize> = match a.filters.passing() {
        Some(p) => group.iter().copied().filter(|&j| p.get(j)).collect(),
        None => group.clone(),
    };
    let left_out = group.len() - passing.len();
    let add = coding::button(
        &format!("Add all {} to the corpus", passing.len()),
        &if left_out > 0 {
            format!(
                "Adds this picture and its copies to the corpus in one step ({left_out} left out by the filters)"
            )
        } else {
            "Adds this picture and every copy of it to the corpus (one step)".to_string()
        },
        move || add_copies(passing.clone()),
    );
    add.set_id("copies-add");
    let _ = sec.append_child(&add);
    Some(sec)
}

/// Adds `items` to the corpus in one step (a copy group, or the copies of the corpus's items).
pub fn add_copies(items: Vec<usize>) {
    let Some(app) = app() else { return };
    if items.is_empty() {
        return;
    }
    let ids: Vec<String> = {
        let a = app.borrow();
        items.iter().map(|&i| a.atlas.id(i).to_string()).collect()
    };
    select::apply(Step {
        op: Op::Add,
        shape: Shape::Ids(ids),
    });
}

/// Items shown in the record card's strip of the closest over the whole collection.
const CLOSEST: usize = 100;

thread_local! {
    /// The last card's closest items (a card is drawn again as its picture and lists arrive).
    static CLOSEST_OF: RefCell<Option<(usize, Vec<usize>)>> = const { RefCell::new(None) };
}

/// The record card's strip of the items closest to item `i` over the whole collection, by every
/// item's compressed vector (fetched on first use, with its progress); None when the atlas keeps
/// no vectors.
fn closest_section(a: &App, i: usize) -> Option<web_sys::Element> {
    let total = a.atlas.manifest.vectors.as_ref()?;
    let mb = total.chunks.iter().map(|c| c.bytes).sum::<u64>() as f64 / 1e6;
    let sec = coding::el("section", "closest", "");
    let _ = sec.append_child(&coding::el("h3", "", "Closest in the whole collection"));
    // Whichever card is open when a part arrives shows the progress, then the strip.
    let redraw = || {
        if let Some(o) = app().and_then(|a| a.borrow().open) {
            open_card(Some(o));
        }
    };
    match vectors::ready() {
        None => {
            if let Some(line) = vectors::status() {
                let p = coding::el("p", "pending", &line);
                let _ = sec.append_child(&p);
            }
            if vectors::status().is_none() || vectors::failed() {
                let b = coding::button(
                    if vectors::failed() {
                        "Try again"
                    } else {
                        "Find them"
                    },
                    &format!(
                        "Compares this item with every other by their compressed vectors (fetches {mb:.0} MB once)"
                    ),
                    move || vectors::fetch(redraw),
                );
                b.set_id("closest-button");
                let _ = sec.append_child(&b);
            }
        }
        Some(q) => {
            let list = CLOSEST_OF.with(|c| {
                let mut c = c.borrow_mut();
                match &*c {
                    Some((j, l)) if *j == i => l.clone(),
                    _ => {
                        let l: Vec<usize> = vitrine_corpus::grow::closest(&q, i, CLOSEST)
                            .into_iter()
                            .map(|(j, _)| j)
                            .collect();
                        *c = Some((i, l.clone()));
                        l
                    }
                }
            });
            let _ = sec.append_child(&picture_strip(a, list.into_iter(), "closest-strip"));
        }
    }
    Some(sec)
}

/// A record card's strip of pictures (a list of `class`): each opens its item's card.
fn picture_strip(a: &App, items: impl Iterator<Item = usize>, class: &str) -> web_sys::Element {
    let strip = coding::el("div", class, "");
    let _ = strip.set_attribute("role", "list");
    let dpr = web_sys::window().map_or(1.0, |w| w.device_pixel_ratio());
    for j in items {
        let tile = coding::el("div", "tile", "");
        let _ = tile.set_attribute("role", "listitem");
        let pic = tray::picture_button(a, j, dpr);
        let _ = pic.set_attribute("data-id", a.atlas.id(j));
        listen(&pic, "click", true, move |_e: web_sys::MouseEvent| {
            open_card(Some(j))
        });
        let _ = tile.append_child(&pic);
        let _ = strip.append_child(&tile);
    }
    strip
}

/// Gives the keyboard's focus to the open record card (its heading).
fn focus_card() {
    if let Some(h) = by_id("card").and_then(|c| c.query_selector("h2").ok().flatten()) {
        if let Ok(h) = h.dyn_into::<HtmlElement>() {
            let _ = h.set_attribute("tabindex", "-1");
            let _ = h.focus();
        }
    }
}

/// Fetches the neighbour chunk that holds item `i`'s list, then shows the card again if it is
/// still open on an item of that chunk.
fn fetch_neighbours(i: usize) {
    let Some(app) = app() else { return };
    let (c, url) = {
        let mut a = app.borrow_mut();
        let (c, file, _) = a.atlas.neighbours.chunk_of(i);
        let file = file.to_string();
        if !a.fetching_neighbours.insert(c) {
            return;
        }
        (c, file)
    };
    wasm_bindgen_futures::spawn_local(async move {
        let got = fetch_bytes(&url).await;
        let Some(app) = self::app() else { return };
        let open = {
            let mut a = app.borrow_mut();
            a.fetching_neighbours.remove(&c);
            let result =
                got.and_then(|b| a.atlas.neighbours.insert(c, &b).map_err(|e| e.to_string()));
            if let Err(e) = result {
                let msg = format!("the neighbour lists could not be loaded: {e}");
                web_sys::console::warn_1(&msg.clone().into());
                let pending =
                    by_id("card").and_then(|c| c.query_selector(".pending").ok().flatten());
                if let Some(p) = pending {
                    p.set_text_content(Some(&msg));
                }
                return;
            }
            a.open.filter(|&o| a.atlas.neighbours.chunk_of(o).0 == c)
        };
        if open.is_some() {
            open_card(open);
        }
        // The links on the map may wait for this list.
        request_frame();
    });
}

thread_local! {
    /// A tiled atlas: the leaves whose records are on their way.
    static FETCHING_RECORDS: RefCell<HashSet<usize>> = RefCell::new(HashSet::new());
}

/// A tiled atlas: fetches the catalogue records of item `i`'s leaf (its chunk of the ids and of
/// every field, and the lists of checksums not here yet); the open card is drawn again after.
fn fetch_records(i: usize) {
    let Some(app) = app() else { return };
    let (leaf, files, lists) = {
        let a = app.borrow();
        let Some(t) = a.atlas.tiled.as_ref() else {
            return;
        };
        let leaf = t.leaf_of(i);
        let (mut files, mut lists) = (Vec::new(), Vec::new());
        for r in a.atlas.record_arrays() {
            let Some((list, names)) = a.atlas.chunk_files(&r) else {
                continue;
            };
            files.push((names[leaf].clone(), 0));
            if !a.tile_sums.contains(&list.file) && !lists.iter().any(|(f, _)| f == &list.file) {
                lists.push((list.file.clone(), list.bytes));
            }
        }
        (leaf, files, lists)
    };
    if !FETCHING_RECORDS.with(|f| f.borrow_mut().insert(leaf)) {
        return;
    }
    wasm_bindgen_futures::spawn_local(async move {
        let got = fetch_many("", &files).await;
        let listed = fetch_many("", &lists).await;
        let Some(app) = self::app() else { return };
        FETCHING_RECORDS.with(|f| f.borrow_mut().remove(&leaf));
        let open = {
            let mut guard = app.borrow_mut();
            let a = &mut *guard;
            let result = got.and_then(|got| {
                let mut listed = listed?;
                for (f, _) in &lists {
                    a.tile_sums
                        .insert(f.clone(), listed.take(f).unwrap_or_default());
                }
                a.viewer
                    .atlas
                    .insert_records(leaf, &a.tile_sums, &got)
                    .map_err(|e| e.to_string())
            });
            if let Err(e) = result {
                let msg = format!("the record could not be loaded: {e}");
                web_sys::console::warn_1(&msg.clone().into());
                select::note(&msg);
                return;
            }
            let leaf_of = |o: usize| a.atlas.tiled.as_ref().map(|t| t.leaf_of(o));
            a.open.filter(|&o| leaf_of(o) == Some(leaf))
        };
        if open.is_some() {
            open_card(open);
        }
    });
}

/// With a record card open: `forward` opens its nearest neighbour not yet walked through; else the
/// card before it.
fn card_step(forward: bool) {
    let Some(app) = app() else { return };
    let next = app.borrow_mut().card_step(forward);
    if let Some(j) = next {
        open_card(Some(j));
    }
}

/// Opens the record card of the item nearest the centre of the view, and moves the keyboard's
/// focus into it (Escape closes it and brings the focus back to the map).
fn open_nearest() {
    let Some(app) = app() else { return };
    let i = app.borrow().nearest_to_centre();
    match i {
        Some(i) => {
            open_card(Some(i));
            focus_card();
        }
        None => select::note("No item in view: move or zoom out first."),
    }
}

/// The help overlay's list of keys, from the one key map's help (so it cannot drift from the keys).
fn write_help() {
    let Some(dl) = by_id("help-keys") else { return };
    let doc = document();
    dl.set_text_content(None);
    for (keys, what) in vitrine_view::input::KEYS {
        let dt = doc.create_element("dt").unwrap();
        dt.set_text_content(Some(keys));
        let dd = doc.create_element("dd").unwrap();
        dd.set_text_content(Some(what));
        let _ = dl.append_child(&dt);
        let _ = dl.append_child(&dd);
    }
}

/// Gives the keyboard's focus to the map.
fn focus_map() {
    if let Some(m) = by_id("map") {
        let _ = m.focus();
    }
}

fn card_picture(a: &App, i: usize) -> Option<web_sys::Element> {
    let (ew, eh) = a.atlas.extents[i];
    if ew == 0 {
        return None;
    }
    let levels = &a.sheets.levels;
    let l = (0..levels.len())
        .rev()
        .find(|&l| levels[l].loaded[a.sheets.sheet_of(l, i)].is_some())?;
    let sheet = levels[l].loaded[a.sheets.sheet_of(l, i)].as_ref()?;
    let [x0, y0, cw, ch] = a.sheets.cell(l, i, (ew, eh));
    let mut rgba = Vec::with_capacity((cw * ch * 4) as usize);
    for y in y0..y0 + ch {
        for x in x0..x0 + cw {
            let s = ((y * sheet.width + x) * 3) as usize;
            if s + 2 < sheet.rgb.len() {
                rgba.extend_from_slice(&[sheet.rgb[s], sheet.rgb[s + 1], sheet.rgb[s + 2], 255]);
            } else {
                rgba.extend_from_slice(&[0, 0, 0, 0]);
            }
        }
    }
    let canvas: HtmlCanvasElement = document().create_element("canvas").ok()?.dyn_into().ok()?;
    canvas.set_width(cw);
    canvas.set_height(ch);
    canvas.set_class_name("picture");
    let ctx: web_sys::CanvasRenderingContext2d = canvas.get_context("2d").ok()??.dyn_into().ok()?;
    let data =
        web_sys::ImageData::new_with_u8_clamped_array_and_sh(wasm_bindgen::Clamped(&rgba), cw, ch)
            .ok()?;
    ctx.put_image_data(&data, 0.0, 0.0).ok()?;
    Some(canvas.into())
}

fn set_hover(i: Option<usize>) {
    let Some(app) = app() else { return };
    let changed = {
        let mut a = app.borrow_mut();
        let changed = a.hover != i;
        a.hover = i;
        changed
    };
    if changed {
        let a = app.borrow();
        if let Some(tip) = by_id("hover") {
            match i {
                Some(i) => {
                    tip.set_text_content(Some(&format!(
                        "{} · {}",
                        a.atlas.id(i),
                        a.atlas.label(i)
                    )));
                    tip.set_hidden(false);
                }
                None => tip.set_hidden(true),
            }
        }
        set_state("hover", i.map(|i| a.atlas.id(i)).unwrap_or(""));
        drop(a);
        request_frame();
    }
}

fn pointer_pos(canvas: &HtmlCanvasElement, x: f64, y: f64) -> [f64; 2] {
    let r = canvas.get_bounding_client_rect();
    let sx = canvas.width() as f64 / r.width().max(1.0);
    let sy = canvas.height() as f64 / r.height().max(1.0);
    [(x - r.left()) * sx, (y - r.top()) * sy]
}

fn listen<E: wasm_bindgen::convert::FromWasmAbi + 'static>(
    target: &web_sys::EventTarget,
    name: &str,
    passive: bool,
    f: impl FnMut(E) + 'static,
) {
    let cb = Closure::<dyn FnMut(E)>::new(f);
    let opts = web_sys::AddEventListenerOptions::new();
    opts.set_passive(passive);
    target
        .add_event_listener_with_callback_and_add_event_listener_options(
            name,
            cb.as_ref().unchecked_ref(),
            &opts,
        )
        .unwrap();
    cb.forget();
}

fn zoom_by(factor: f64, at: Option<[f64; 2]>) {
    let Some(app) = app() else { return };
    let to = app.borrow().zoomed(factor, at);
    glide_to(to, ZOOM_GLIDE_MS);
}

fn pan_by(dx: f64, dy: f64) {
    let Some(app) = app() else { return };
    let to = app.borrow().panned(dx, dy);
    glide_to(to, ZOOM_GLIDE_MS);
}

fn fit() {
    let Some(app) = app() else { return };
    let to = app.borrow().fitted();
    glide_to(to, FIT_GLIDE_MS);
}

/// Shows map `i` (fitted to the window), the items gliding there from their places on the map
/// shown (none under reduced motion).
fn set_map(i: usize) {
    show_map_now(i, glide_ms(MAP_GLIDE_MS));
}

fn show_map_now(i: usize, ms: f64) {
    let Some(app) = app() else { return };
    {
        let mut a = app.borrow_mut();
        if !a.set_map_gliding(i, now(), ms) {
            return;
        }
        select::show_key_sketch(&a);
        set_state("map", &a.atlas.maps[i].name);
    }
    if let Some(sel) = document()
        .get_element_by_id("map-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    {
        sel.set_selected_index(i as i32);
    }
    request_frame();
}

/// Carries out one action: every key, button and script command of the page comes here.
fn dispatch(action: Action) {
    use vitrine_view::input::ZOOM_STEP;
    match action {
        Action::ZoomIn => zoom_by(ZOOM_STEP, None),
        Action::ZoomOut => zoom_by(1.0 / ZOOM_STEP, None),
        Action::Fit => fit(),
        Action::Pan { dx, dy } => pan_by(dx, dy),
        Action::NextMap => {
            if let Some(app) = app() {
                let next = app.borrow().next_map();
                set_map(next);
            }
        }
        Action::OpenNearest => open_nearest(),
        Action::NextNeighbour => card_step(true),
        Action::PreviousCard => card_step(false),
        Action::Escape => escape(),
        Action::SetMode(m) => select::set_mode(m),
        Action::SelectAll => select::everything(),
        Action::SelectView { add } => select::select_view(add),
        Action::ClearSelection => select::clear(),
        Action::Undo => select::undo(false),
        Action::Redo => select::undo(true),
        Action::KeyPoint { add, subtract } => select::key_point(add, subtract),
        Action::KeyClose => {
            select::key_close();
        }
        Action::FocusSearch => {
            if let Some(i) = by_id("search") {
                let _ = i.focus();
            }
        }
        Action::ToggleFilterPanel => filters::toggle_panel(),
        Action::ToggleHelp => toggle_panel("help"),
        Action::ToggleAbout => toggle_panel("about"),
        Action::ToggleTheme => toggle_theme(),
        Action::OpenCoding => coding::open_walk(false),
    }
}

/// Escape: drops a keyboard lasso under way, else leaves a selection mode, else closes every
/// open panel (record card, help, about, filter panel).
fn escape() {
    if select::key_cancel() {
        return;
    }
    if coding::escape() {
        return;
    }
    if measure::close() || bulk::close() || grow::close() {
        return;
    }
    let selecting = app().is_some_and(|a| a.borrow().mode != Mode::Move);
    if selecting {
        return select::set_mode(Mode::Move);
    }
    open_card(None);
    for id in ["help", "about"] {
        if let Some(p) = by_id(id) {
            if !p.hidden() {
                p.set_hidden(true);
                focus_map();
            }
        }
    }
    filters::close_panel();
}

/// Shows or hides a panel of the page (help, about), moving the focus into it and back.
fn toggle_panel(id: &str) {
    let Some(p) = by_id(id) else { return };
    let show = p.hidden();
    p.set_hidden(!show);
    if show {
        let _ = p.set_attribute("tabindex", "-1");
        let _ = p.focus();
    } else {
        focus_map();
    }
}

/// The themes, in the order `g` steps through them: the paper reading room, and a neutral grey
/// surround for judging colour (ISO 3664 asks for a neutral grey surround when pictures are
/// compared for colour).
const THEMES: [(&str, raster::Theme); 2] = [
    ("paper", raster::READING_ROOM),
    ("grey", raster::NEUTRAL_GREY),
];

/// The theme kept in the browser between visits (local storage), or the paper one.
fn stored_theme() -> usize {
    web_sys::window()
        .and_then(|w| w.local_storage().ok().flatten())
        .and_then(|s| s.get_item("vitrine-theme").ok().flatten())
        .and_then(|t| THEMES.iter().position(|(n, _)| *n == t))
        .unwrap_or(0)
}

/// Puts theme `k` on the page and the map, and remembers it.
fn apply_theme(k: usize) {
    let (name, theme) = THEMES[k % THEMES.len()];
    if let Some(b) = document().body() {
        let _ = b.set_attribute("data-theme", name);
    }
    if let Some(s) = web_sys::window().and_then(|w| w.local_storage().ok().flatten()) {
        let _ = s.set_item("vitrine-theme", name);
    }
    if let Some(c) = document()
        .get_element_by_id("theme-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    {
        c.set_value(name);
    }
    if let Some(app) = app() {
        app.borrow_mut().set_theme(theme);
        timeline_strip::draw();
    }
    request_frame();
}

fn toggle_theme() {
    let now = document()
        .body()
        .and_then(|b| b.get_attribute("data-theme"))
        .and_then(|t| THEMES.iter().position(|(n, _)| *n == t))
        .unwrap_or(0);
    apply_theme(now + 1);
}

/// What a pointer event came to, on the page.
fn pointer_outcome(outcome: Pointer) {
    match outcome {
        Pointer::Nothing => {}
        Pointer::Sketch => match app() {
            Some(a) => select::draw_sketch(a.borrow().sketch.as_ref()),
            None => select::draw_sketch(None),
        },
        Pointer::Moved => request_frame(),
        Pointer::Hover(p) => {
            HOVER_AT.with(|h| h.set(Some(p)));
            let i = app().and_then(|a| a.borrow().pick(p));
            set_hover(i);
        }
        Pointer::Click { at, ctrl } => {
            let Some(app) = app() else { return };
            let i = app.borrow().pick(at);
            if ctrl {
                // Ctrl-click (Cmd-click) adds the item to the selection or takes it out.
                let step = i.and_then(|i| app.borrow().toggle_step(i));
                if let Some(step) = step {
                    select::apply(step);
                }
            } else {
                open_card(i);
            }
        }
        Pointer::Step(step) => {
            select::draw_sketch(None);
            select::apply(step);
        }
    }
}

/// Listens to one kind of pointer event on the map: the viewer core decides what it comes to.
fn listen_pointer(
    canvas: &HtmlCanvasElement,
    name: &str,
    f: impl Fn(&mut Viewer, &web_sys::PointerEvent, [f64; 2]) -> Pointer + 'static,
) {
    let c = canvas.clone();
    listen(canvas, name, false, move |e: web_sys::PointerEvent| {
        let p = pointer_pos(&c, e.client_x() as f64, e.client_y() as f64);
        if name_is_down(&e) {
            let _ = c.set_pointer_capture(e.pointer_id());
        }
        let Some(app) = app() else { return };
        let outcome = f(&mut app.borrow_mut().viewer, &e, p);
        pointer_outcome(outcome);
    });
}

fn name_is_down(e: &web_sys::PointerEvent) -> bool {
    e.type_() == "pointerdown"
}

fn install_events(canvas: &HtmlCanvasElement) {
    listen_pointer(canvas, "pointerdown", |v, e, p| {
        v.pointer_down(e.pointer_id(), p, e.shift_key(), e.alt_key())
    });
    listen_pointer(canvas, "pointermove", |v, e, p| {
        v.pointer_move(e.pointer_id(), p)
    });
    listen_pointer(canvas, "pointerup", |v, e, p| {
        v.pointer_up(e.pointer_id(), p, e.ctrl_key() || e.meta_key())
    });
    listen(
        canvas,
        "pointercancel",
        false,
        move |e: web_sys::PointerEvent| {
            if let Some(app) = app() {
                app.borrow_mut().pointer_cancel(e.pointer_id());
            }
            select::draw_sketch(None);
        },
    );
    listen(
        canvas,
        "pointerleave",
        false,
        move |_e: web_sys::PointerEvent| {
            HOVER_AT.with(|h| h.set(None));
            set_hover(None)
        },
    );
    let c = canvas.clone();
    listen(canvas, "wheel", false, move |e: web_sys::WheelEvent| {
        e.prevent_default();
        let p = pointer_pos(&c, e.client_x() as f64, e.client_y() as f64);
        let lines = if e.delta_mode() == 1 { 20.0 } else { 1.0 };
        zoom_by((-e.delta_y() * lines * 0.0015).exp(), Some(p));
    });
    let window = web_sys::window().unwrap();
    listen(
        &window,
        "keydown",
        false,
        move |e: web_sys::KeyboardEvent| {
            let target = e
                .target()
                .and_then(|t| t.dyn_into::<web_sys::HtmlElement>().ok());
            let tag = target.as_ref().map(|t| t.tag_name()).unwrap_or_default();
            // Keys typed into the search box or a filter's fields are text, not commands.
            if matches!(tag.as_str(), "INPUT" | "TEXTAREA" | "SELECT") {
                return;
            }
            // The coding view, when open, takes every key it knows.
            if coding::key(&e) {
                return;
            }
            let key = e.key();
            // (A key held down repeats: a mark is toggled once.)
            if !e.ctrl_key() && !e.alt_key() && !e.meta_key() && !e.repeat() && grow::key(&key) {
                e.prevent_default();
                return;
            }
            let press = KeyPress {
                key: &key,
                shift: e.shift_key(),
                ctrl: e.ctrl_key() || e.meta_key(),
                alt: e.alt_key(),
                on_control: matches!(tag.as_str(), "BUTTON" | "A" | "SUMMARY"),
            };
            let doing = app().map_or(Default::default(), |a| {
                let a = a.borrow();
                vitrine_view::input::Doing {
                    selecting: a.mode != Mode::Move,
                    sketching: a.key_sketch.is_some(),
                }
            });
            if let Some(action) = vitrine_view::input::key_action(&press, doing) {
                e.prevent_default();
                dispatch(action);
            }
        },
    );
    // The canvas changes size with the window and when the bars above and below it grow or
    // shrink (the timeline strip appearing, the filters bar wrapping on a narrow window): its
    // pixels must follow its box, or
    // the browser would scale the picture and pointer positions would drift.
    let c = canvas.clone();
    let on_resize = Closure::<dyn FnMut(js_sys::Array)>::new(move |_entries: js_sys::Array| {
        resize_canvas(&c);
        timeline_strip::draw();
        request_frame();
    });
    if let Ok(ro) = web_sys::ResizeObserver::new(on_resize.as_ref().unchecked_ref()) {
        ro.observe(canvas);
        std::mem::forget(ro);
    }
    on_resize.forget();
    let c = canvas.clone();
    listen(&window, "resize", true, move |_e: web_sys::Event| {
        resize_canvas(&c);
        timeline_strip::draw();
        request_frame();
    });
    for (id, action) in [
        ("zoom-in", Action::ZoomIn),
        ("zoom-out", Action::ZoomOut),
        ("fit", Action::Fit),
        ("help-button", Action::ToggleHelp),
        ("about-button", Action::ToggleAbout),
    ] {
        if let Some(b) = by_id(id) {
            listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
                dispatch(action)
            });
        }
    }
    if let Some(sel) = document()
        .get_element_by_id("theme-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    {
        let s2 = sel.clone();
        listen(&sel, "change", true, move |_e: web_sys::Event| {
            let k = THEMES
                .iter()
                .position(|(n, _)| *n == s2.value())
                .unwrap_or(0);
            apply_theme(k);
        });
    }
    write_help();
}

/// CSS pixels per canvas pixel (the canvas is sized at the device's pixel ratio, see
/// `resize_canvas`). Read from the ratio, not from the canvas's layout: reading a layout size after
/// the frame has changed the page forces the browser to lay the page out there and then.
fn css_per_px() -> f64 {
    1.0 / web_sys::window()
        .map_or(1.0, |w| w.device_pixel_ratio())
        .max(1.0)
}

fn resize_canvas(canvas: &HtmlCanvasElement) {
    let ratio = web_sys::window().unwrap().device_pixel_ratio().max(1.0);
    let w = (canvas.client_width() as f64 * ratio).round().max(1.0) as u32;
    let h = (canvas.client_height() as f64 * ratio).round().max(1.0) as u32;
    if canvas.width() != w || canvas.height() != h {
        canvas.set_width(w);
        canvas.set_height(h);
    }
}

async fn load(base: String) -> Result<(), String> {
    let canvas: HtmlCanvasElement = document()
        .get_element_by_id("map")
        .and_then(|e| e.dyn_into().ok())
        .ok_or("the page has no canvas with id \"map\"")?;
    resize_canvas(&canvas);
    progress(0.0, "Reading the atlas manifest…");
    let manifest_url = format!("{base}{}", vitrine_format::MANIFEST_FILE);
    let text = match fetch_bytes(&manifest_url).await {
        Ok(b) => String::from_utf8(b).map_err(|_| "atlas.json is not UTF-8 text".to_string())?,
        Err(e) => {
            show_message(
                "No atlas here",
                &format!(
                    "This page could not read {manifest_url} ({e}). The viewer must sit in an atlas folder made by \
                     `vitrine build`, served over HTTP: run `vitrine serve ATLAS-FOLDER` and open the address it prints."
                ),
            );
            return Ok(());
        }
    };
    let manifest =
        vitrine_format::Manifest::from_json(&text).map_err(|e| format!("atlas.json: {e}"))?;
    let manifest_sha = vitrine_format::sha256_hex(text.as_bytes());
    let tiled = manifest.tiles.is_some();
    let (atlas, tile_sums) = match &manifest.tiles {
        Some(t) => {
            // A tiled atlas: the first picture comes from overview pictures and the leaves in
            // view, fetched by the frames; here only their lists of checksums.
            let mut refs = vec![&t.overview_sums];
            for r in vitrine_view::atlas::leaf_arrays(&manifest) {
                refs.extend(t.chunked(&r.file).map(|c| &c.sums));
            }
            let list: Vec<(String, u64)> = refs.iter().map(|r| (r.file.clone(), r.bytes)).collect();
            progress(
                0.1,
                &format!(
                    "Loading {} ({} items in {} tiles)",
                    manifest.title,
                    manifest.item_count,
                    t.pyramid.tiles.len()
                ),
            );
            let got = fetch_many(&base, &list).await?;
            for r in &refs {
                r.verify(got.bytes(r).map_err(|e| e.to_string())?)
                    .map_err(|e| e.to_string())?;
            }
            (AtlasData::tiled(manifest).map_err(|e| e.to_string())?, got)
        }
        None => {
            // What the first picture needs comes first; ids, neighbour lists and catalogue
            // columns are fetched while the map is already on screen.
            let first = AtlasData::first_files(&manifest);
            let total: u64 = first.iter().map(|(_, b)| b).sum::<u64>().max(1);
            progress(
                0.1,
                &format!(
                    "Loading {} ({} files, {:.1} MB)",
                    manifest.title,
                    first.len(),
                    total as f64 / 1e6
                ),
            );
            let got = fetch_many(&base, &first).await?;
            progress(1.0, "Preparing the map…");
            let atlas = AtlasData::from_parts(manifest, &got).map_err(|e| e.to_string())?;
            (atlas, vitrine_format::AtlasFiles::new())
        }
    };
    let gpu = init_gpu(&canvas).await?;
    set_state("renderer", &gpu.renderer);
    set_state("backend", gpu.backend);
    if let Some(t) = by_id("atlas-title") {
        t.set_text_content(Some(&atlas.manifest.title));
    }
    document().set_title(&format!("{} — Vitrine", atlas.manifest.title));
    if let Some(panel) = by_id("about") {
        let doc = document();
        let h = doc.create_element("h2").unwrap();
        h.set_text_content(Some(&format!("About {}", atlas.manifest.title)));
        let _ = panel.append_child(&h);
        let mut sections = vitrine_view::atlas::about(&atlas.manifest);
        sections.push((
            "This viewer".to_string(),
            vec![(
                "drawn with".to_string(),
                format!(
                    "{} — the map is drawn on the processor and shown as one picture, so a \
                     computer without a graphics card shows it as well",
                    gpu.renderer
                ),
            )],
        ));
        for (heading, lines) in sections {
            let h3 = doc.create_element("h3").unwrap();
            h3.set_text_content(Some(&heading));
            let _ = panel.append_child(&h3);
            let dl = doc.create_element("dl").unwrap();
            for (k, v) in lines {
                let dt = doc.create_element("dt").unwrap();
                dt.set_text_content(Some(&k));
                let dd = doc.create_element("dd").unwrap();
                dd.set_text_content(Some(&v));
                let _ = dl.append_child(&dt);
                let _ = dl.append_child(&dd);
            }
            let _ = panel.append_child(&dl);
        }
    }
    if let Some(sel) = document()
        .get_element_by_id("map-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    {
        for (i, m) in atlas.maps.iter().enumerate() {
            let o = web_sys::HtmlOptionElement::new_with_text_and_value(&m.name, &i.to_string())
                .unwrap();
            o.set_title(&m.description);
            let _ = sel.append_child(&o);
        }
        let s2 = sel.clone();
        listen(&sel, "change", true, move |_e: web_sys::Event| {
            if let Ok(i) = s2.value().parse::<usize>() {
                set_map(i);
            }
        });
    }
    set_state("map", &atlas.maps[0].name);
    if let Some(c) = by_id("atlas-count") {
        c.set_text_content(Some(&format!("{} items", atlas.n)));
    }
    let theme = stored_theme();
    let viewer = Viewer::new(
        atlas,
        [canvas.width() as f64, canvas.height() as f64],
        manifest_sha,
        THEMES[theme].1,
    );
    let app = App {
        viewer,
        canvas: canvas.clone(),
        gpu,
        pixels: Vec::new(),
        frame_pending: false,
        dirty: false,
        fetching: HashSet::new(),
        fetching_neighbours: HashSet::new(),
        frame_ms: [0.0; 3],
        first_full: false,
        timeline: None,
        tile_sums,
        fetching_tiles: 0,
    };
    APP.with(|a| *a.borrow_mut() = Some(Rc::new(RefCell::new(app))));
    apply_theme(theme);
    install_events(&canvas);
    select::install();
    filters::install();
    share::install();
    tray::install();
    coding::install();
    measure::install();
    bulk::install();
    grow::install();
    if let Some(l) = by_id("loading") {
        l.set_hidden(true);
    }
    request_frame();
    if tiled {
        // The catalogue of a tiled atlas is not fetched whole: the map alone, for now.
        after_next_frame().await;
        if let Some(app) = self::app() {
            app.borrow_mut().make_picker();
        }
        set_state("catalogue", "tiled");
        set_state("state", "ready");
        return Ok(());
    }
    load_catalogue(base).await
}

/// Fetches and adds the ids, neighbour lists and catalogue columns; the page is "ready" after.
async fn load_catalogue(base: String) -> Result<(), String> {
    let Some(app) = app() else { return Ok(()) };
    let later = AtlasData::later_files(&app.borrow().atlas.manifest);
    let mb = later.iter().map(|(_, b)| b).sum::<u64>() as f64 / 1e6;
    let count = app.borrow().atlas.n;
    if let Some(c) = by_id("atlas-count") {
        c.set_text_content(Some(&format!(
            "{count} items · loading the catalogue ({mb:.1} MB)…"
        )));
    }
    set_state("catalogue", "loading");
    let pending = start_fetches(&base, &later)?;
    // While the catalogue downloads, once the first picture is up: the index for hover and clicks.
    after_next_frame().await;
    {
        let mut a = app.borrow_mut();
        a.make_picker();
    }
    let got = fetched_many(pending, &later).await?;
    app.borrow_mut()
        .atlas
        .complete(&got)
        .map_err(|e| e.to_string())?;
    timeline_strip::install(&mut app.borrow_mut());
    timeline_strip::draw();
    filters::install_colour_menu();
    share::restore_from_address();
    coding::restore().await;
    if let Some(c) = by_id("atlas-count") {
        c.set_text_content(Some(&format!("{count} items")));
    }
    select::refresh();
    set_state("catalogue", "ready");
    set_state("state", "ready");
    request_frame();
    Ok(())
}

/// Entry point, called by the page's loader script.
#[wasm_bindgen]
pub fn start() {
    std::panic::set_hook(Box::new(|info| {
        web_sys::console::error_1(&format!("vitrine viewer: {info}").into());
        show_message(
            "The viewer stopped",
            &format!("An internal error stopped the viewer: {info}. Reload the page."),
        );
    }));
    let location = web_sys::window().unwrap().location();
    if location.protocol().unwrap_or_default() == "file:" {
        show_message(
            "Open this atlas through a web server",
            "Browsers do not let a page opened from a file read the atlas beside it. Run `vitrine serve` on this \
             folder and open the address it prints, or upload the folder to any static web host.",
        );
        return;
    }
    wasm_bindgen_futures::spawn_local(async {
        if let Err(e) = load(String::new()).await {
            show_message("The atlas could not be opened", &e);
        }
    });
}

/// For tests and scripts: the screen position (canvas pixels) of the item with this id, if on the map.
#[wasm_bindgen]
pub fn screen_position_of(id: &str) -> Option<Vec<f64>> {
    let app = app()?;
    let a = app.borrow();
    let i = (0..a.atlas.n).find(|&i| a.atlas.id(i) == id)?;
    let s = a.camera.to_screen(a.atlas.positions[i]);
    Some(vec![s[0], s[1]])
}

/// For benchmarks: the id of an item in the most crowded part of the current map ("" if none).
#[wasm_bindgen]
pub fn crowded_item() -> String {
    let Some(app) = app() else {
        return String::new();
    };
    let a = app.borrow();
    match a.grid.crowded() {
        Some(i) => a.atlas.id(i as usize).to_string(),
        None => String::new(),
    }
}

/// For tests and scripts: a JSON summary of what the last frame drew.
#[wasm_bindgen]
pub fn view_state() -> String {
    let Some(app) = app() else { return "{}".into() };
    let a = app.borrow();
    let loaded: Vec<usize> = a
        .sheets
        .levels
        .iter()
        .map(|l| l.loaded.iter().filter(|s| s.is_some()).count())
        .collect();
    // A tiled atlas: the tiles drawn from their own pictures, and the leaves by state.
    let overview_tiles: Vec<usize> = a
        .plan
        .draws
        .iter()
        .filter_map(|d| match *d {
            vitrine_view::tiled::Draw::Overview { tile, from } if tile == from => Some(tile),
            _ => None,
        })
        .collect();
    let leaves = |f: vitrine_view::tiled::Fetch| {
        a.atlas
            .tiled
            .as_ref()
            .map_or(0, |t| t.leaf_state.iter().filter(|&&s| s == f).count())
    };
    serde_json::json!({
        "renderer": a.gpu.renderer,
        "backend": a.gpu.backend,
        // How the frame reaches the canvas: straight into a WebGL2 canvas, or through wgpu's surface.
        "present": if a.gpu.direct.is_some() { "canvas" } else { "surface" },
        "items": a.atlas.n,
        "zoom": a.camera.zoom / a.base_zoom,
        // The selection's steps, in map coordinates (as a corpus file holds them).
        "steps": a.selection.steps(),
        "side_px": a.last.side_px,
        "marks": a.last.marks,
        "thumbnails": a.last.thumbnails,
        "visited": a.last.visited,
        "raster_ms": a.frame_ms[0],
        "present_ms": a.frame_ms[1],
        "render_ms": a.frame_ms[2],
        "frames": a.frames,
        "sheets_loaded": loaded,
        "sheet_bytes": a.sheets.bytes,
        "sheets_evicted": a.sheets.evicted,
        "fetching": a.fetching.len(),
        "gliding": a.glide.is_some() || a.map_gliding(),
        "map": a.atlas.maps[a.atlas.current].name,
        "wasm_bytes": wasm_bindgen::memory()
            .dyn_into::<js_sys::WebAssembly::Memory>()
            .map(|m| m.buffer().dyn_into::<js_sys::ArrayBuffer>().map(|b| b.byte_length()).unwrap_or(0))
            .unwrap_or(0),
        "maps": a.atlas.maps.iter().map(|m| m.name.clone()).collect::<Vec<_>>(),
        "tiles_fetching": a.fetching_tiles,
        "overviews_drawn": overview_tiles.len(),
        "overview_tiles": overview_tiles,
        "overviews_kept": a.atlas.tiled.as_ref().map_or(0, |t| t.overviews_kept()),
        "leaves_here": leaves(vitrine_view::tiled::Fetch::Here),
        "leaves_failed": leaves(vitrine_view::tiled::Fetch::Failed),
    })
    .to_string()
}

/// For tests and scripts: shows the whole map at once (no glide) and draws.
#[wasm_bindgen]
pub fn fit_view() {
    let Some(app) = app() else { return };
    let mut a = app.borrow_mut();
    a.glide = None;
    a.camera = a.fitted();
    a.render();
}

/// For tests and scripts: zooms by `factor` about the canvas centre, draws at once, and starts
/// fetching the sheets the new view wants.
#[wasm_bindgen]
pub fn zoom_view(factor: f64) {
    let Some(app) = app() else { return };
    let wanted = {
        let mut a = app.borrow_mut();
        let at = [a.camera.size[0] / 2.0, a.camera.size[1] / 2.0];
        let limits = a.zoom_limits();
        a.glide = None;
        a.camera.zoom_at(at, factor, limits);
        a.render();
        a.last.wanted.clone()
    };
    fetch_sheets(wanted);
}

/// For tests and scripts: centres the view on map point (x, y) at `factor` times the fitted
/// zoom, draws at once, and starts fetching what the new view wants.
#[wasm_bindgen]
pub fn look_at(x: f64, y: f64, factor: f64) {
    let Some(app) = app() else { return };
    let wanted = {
        let mut a = app.borrow_mut();
        let [lo, hi] = a.zoom_limits();
        a.glide = None;
        a.camera.centre = [x, y];
        a.camera.zoom = (a.base_zoom * factor).clamp(lo, hi);
        a.render();
        a.last.wanted.clone()
    };
    fetch_sheets(wanted);
}

/// For tests and scripts: moves the view by (dx, dy) canvas pixels, draws at once, and starts
/// fetching the sheets the new view wants.
#[wasm_bindgen]
pub fn pan_view(dx: f64, dy: f64) {
    let Some(app) = app() else { return };
    let wanted = {
        let mut a = app.borrow_mut();
        a.glide = None;
        a.camera.pan(dx, dy);
        a.render();
        a.last.wanted.clone()
    };
    fetch_sheets(wanted);
}

/// For tests and scripts: opens the record card of the item with this id (false when none has it).
#[wasm_bindgen]
pub fn open_record(id: &str) -> bool {
    let Some(app) = app() else { return false };
    let found = {
        let a = app.borrow();
        (0..a.atlas.n).find(|&i| a.atlas.id(i) == id)
    };
    if found.is_some() {
        open_card(found);
    }
    found.is_some()
}

/// Centres the view on the item with this id at `factor` times the fitted zoom, and draws at once.
/// Returns false when there is no such item.
#[wasm_bindgen]
pub fn focus_item(id: &str, factor: f64) -> bool {
    let Some(app) = app() else { return false };
    let found = {
        let mut a = app.borrow_mut();
        match (0..a.atlas.n).find(|&i| a.atlas.id(i) == id) {
            Some(i) => {
                let p = a.atlas.positions[i];
                a.glide = None;
                a.camera.centre = [p[0] as f64, p[1] as f64];
                let limits = a.zoom_limits();
                a.camera.zoom = (a.base_zoom * factor).clamp(limits[0], limits[1]);
                a.render();
                true
            }
            None => false,
        }
    };
    if found {
        let wanted = app.borrow().last.wanted.clone();
        fetch_sheets(wanted);
    }
    found
}

/// For benchmarks: a map change frame by frame on a clock of the caller's. `t` 0 starts the glide
/// of every item to its place on the map `name` (half a second long); a later `t` (ms) moves the
/// items to where they are then and draws at once. Returns whether the glide is still under way.
#[wasm_bindgen]
pub fn glide_map_step(name: &str, t: f64) -> bool {
    let Some(app) = app() else { return false };
    let mut a = app.borrow_mut();
    if t == 0.0 {
        let Some(i) = a.atlas.maps.iter().position(|m| m.name == name) else {
            return false;
        };
        a.set_map_gliding(i, 0.0, MAP_GLIDE_MS);
    } else {
        a.step_map_glide(t);
    }
    a.render();
    a.map_gliding()
}

/// For tests and scripts: shows the map with this name and draws at once; false when there is none.
#[wasm_bindgen]
pub fn show_map(name: &str) -> bool {
    let Some(app) = app() else { return false };
    let i = app.borrow().atlas.maps.iter().position(|m| m.name == name);
    match i {
        Some(i) => {
            show_map_now(i, 0.0);
            app.borrow_mut().render();
            true
        }
        None => false,
    }
}
