//! The browser layer: fetches the atlas, turns DOM events into camera moves and picks, puts the
//! record card on the page, and hands each finished frame to wgpu as one texture.

use std::cell::RefCell;
use std::collections::{HashMap, HashSet};
use std::rc::Rc;

use wasm_bindgen::prelude::*;
use wasm_bindgen::JsCast;
use wasm_bindgen_futures::JsFuture;
use web_sys::{Document, HtmlCanvasElement, HtmlElement};

use crate::atlas::AtlasData;
use crate::camera::Camera;
use crate::grid::Grid;
use crate::pick::Picker;
use crate::raster::{self, Scene, Sheet, SheetStore, READING_ROOM};

const MAX_FETCHES: usize = 4;
/// Items per cell of the culling grid on average.
const GRID_ITEMS_PER_CELL: usize = 16;

struct Gpu {
    surface: wgpu::Surface<'static>,
    device: wgpu::Device,
    queue: wgpu::Queue,
    config: wgpu::SurfaceConfiguration,
    pipeline: wgpu::RenderPipeline,
    layout: wgpu::BindGroupLayout,
    texture_format: wgpu::TextureFormat,
    frame: Option<(wgpu::Texture, wgpu::BindGroup, u32, u32)>,
    renderer: String,
}

struct App {
    canvas: HtmlCanvasElement,
    gpu: Gpu,
    atlas: AtlasData,
    sheets: SheetStore,
    picker: Picker,
    grid: Grid,
    camera: Camera,
    pixels: Vec<u8>,
    hover: Option<usize>,
    open: Option<usize>,
    drag: Option<Drag>,
    pointers: HashMap<i32, [f64; 2]>,
    pinch: Option<f64>,
    frame_pending: bool,
    fetching: HashSet<(usize, usize)>,
    frames: u64,
    last: raster::FrameStats,
    base_zoom: f64,
    first_full: bool,
}

struct Drag {
    start: [f64; 2],
    last: [f64; 2],
    moved: bool,
}

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
) -> Result<HashMap<String, Vec<u8>>, String> {
    let window = web_sys::window().unwrap();
    let started: Vec<(String, js_sys::Promise)> = files
        .iter()
        .map(|(f, _)| {
            let url = format!("{base}{f}");
            let p = window.fetch_with_str(&url);
            (url, p)
        })
        .collect();
    let mut got = HashMap::new();
    for ((file, _), (url, p)) in files.iter().zip(started) {
        got.insert(file.clone(), fetched_bytes(&url, p).await?);
    }
    Ok(got)
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

const SHADER: &str = r#"
@group(0) @binding(0) var frame: texture_2d<f32>;

@vertex
fn vs(@builtin(vertex_index) i: u32) -> @builtin(position) vec4<f32> {
    let x = f32(i32(i & 1u) * 4 - 1);
    let y = f32(i32(i >> 1u) * 4 - 1);
    return vec4<f32>(x, y, 0.0, 1.0);
}

@fragment
fn fs(@builtin(position) p: vec4<f32>) -> @location(0) vec4<f32> {
    return textureLoad(frame, vec2<i32>(p.xy), 0);
}
"#;

async fn init_gpu(canvas: &HtmlCanvasElement) -> Result<Gpu, String> {
    let mut desc = wgpu::InstanceDescriptor::new_without_display_handle();
    desc.backends = wgpu::Backends::GL;
    let instance = wgpu::Instance::new(desc);
    let surface = instance
        .create_surface(wgpu::SurfaceTarget::Canvas(canvas.clone()))
        .map_err(|e| format!("this browser gives no WebGL2 context: {e}"))?;
    let adapter = instance
        .request_adapter(&wgpu::RequestAdapterOptions {
            power_preference: wgpu::PowerPreference::LowPower,
            force_fallback_adapter: false,
            compatible_surface: Some(&surface),
            ..Default::default()
        })
        .await
        .map_err(|e| format!("no graphics adapter: {e}"))?;
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
    let texture_format = if format.is_srgb() {
        wgpu::TextureFormat::Rgba8UnormSrgb
    } else {
        wgpu::TextureFormat::Rgba8Unorm
    };
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
    let module = device.create_shader_module(wgpu::ShaderModuleDescriptor {
        label: Some("frame"),
        source: wgpu::ShaderSource::Wgsl(SHADER.into()),
    });
    let layout = device.create_bind_group_layout(&wgpu::BindGroupLayoutDescriptor {
        label: Some("frame"),
        entries: &[wgpu::BindGroupLayoutEntry {
            binding: 0,
            visibility: wgpu::ShaderStages::FRAGMENT,
            ty: wgpu::BindingType::Texture {
                sample_type: wgpu::TextureSampleType::Float { filterable: false },
                view_dimension: wgpu::TextureViewDimension::D2,
                multisampled: false,
            },
            count: None,
        }],
    });
    let pipeline_layout = device.create_pipeline_layout(&wgpu::PipelineLayoutDescriptor {
        label: Some("frame"),
        bind_group_layouts: &[Some(&layout)],
        immediate_size: 0,
    });
    let pipeline = device.create_render_pipeline(&wgpu::RenderPipelineDescriptor {
        label: Some("frame"),
        layout: Some(&pipeline_layout),
        vertex: wgpu::VertexState {
            module: &module,
            entry_point: Some("vs"),
            compilation_options: Default::default(),
            buffers: &[],
        },
        primitive: wgpu::PrimitiveState::default(),
        depth_stencil: None,
        multisample: wgpu::MultisampleState::default(),
        fragment: Some(wgpu::FragmentState {
            module: &module,
            entry_point: Some("fs"),
            compilation_options: Default::default(),
            targets: &[Some(wgpu::ColorTargetState {
                format,
                blend: None,
                write_mask: wgpu::ColorWrites::ALL,
            })],
        }),
        multiview_mask: None,
        cache: None,
    });
    let renderer = format!("{} ({:?})", info.name, info.backend);
    Ok(Gpu {
        surface,
        device,
        queue,
        config,
        pipeline,
        layout,
        texture_format,
        frame: None,
        renderer,
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

    fn present(&mut self, pixels: &[u8], w: u32, h: u32) {
        if !matches!(&self.frame, Some((_, _, fw, fh)) if *fw == w && *fh == h) {
            let texture = self.device.create_texture(&wgpu::TextureDescriptor {
                label: Some("frame"),
                size: wgpu::Extent3d {
                    width: w,
                    height: h,
                    depth_or_array_layers: 1,
                },
                mip_level_count: 1,
                sample_count: 1,
                dimension: wgpu::TextureDimension::D2,
                format: self.texture_format,
                usage: wgpu::TextureUsages::TEXTURE_BINDING | wgpu::TextureUsages::COPY_DST,
                view_formats: &[],
            });
            let view = texture.create_view(&Default::default());
            let bind = self.device.create_bind_group(&wgpu::BindGroupDescriptor {
                label: Some("frame"),
                layout: &self.layout,
                entries: &[wgpu::BindGroupEntry {
                    binding: 0,
                    resource: wgpu::BindingResource::TextureView(&view),
                }],
            });
            self.frame = Some((texture, bind, w, h));
        }
        let (texture, bind, _, _) = self.frame.as_ref().unwrap();
        self.queue.write_texture(
            wgpu::TexelCopyTextureInfo {
                texture,
                mip_level: 0,
                origin: wgpu::Origin3d::ZERO,
                aspect: wgpu::TextureAspect::All,
            },
            pixels,
            wgpu::TexelCopyBufferLayout {
                offset: 0,
                bytes_per_row: Some(w * 4),
                rows_per_image: Some(h),
            },
            wgpu::Extent3d {
                width: w,
                height: h,
                depth_or_array_layers: 1,
            },
        );
        let frame = match self.surface.get_current_texture() {
            wgpu::CurrentSurfaceTexture::Success(t)
            | wgpu::CurrentSurfaceTexture::Suboptimal(t) => t,
            _ => {
                self.surface.configure(&self.device, &self.config);
                return;
            }
        };
        let view = frame.texture.create_view(&Default::default());
        let mut enc = self.device.create_command_encoder(&Default::default());
        {
            let mut pass = enc.begin_render_pass(&wgpu::RenderPassDescriptor {
                label: Some("frame"),
                color_attachments: &[Some(wgpu::RenderPassColorAttachment {
                    view: &view,
                    depth_slice: None,
                    resolve_target: None,
                    ops: wgpu::Operations {
                        load: wgpu::LoadOp::Clear(wgpu::Color::WHITE),
                        store: wgpu::StoreOp::Store,
                    },
                })],
                depth_stencil_attachment: None,
                timestamp_writes: None,
                occlusion_query_set: None,
                multiview_mask: None,
            });
            pass.set_pipeline(&self.pipeline);
            pass.set_bind_group(0, bind, &[]);
            pass.draw(0..3, 0..1);
        }
        self.queue.submit([enc.finish()]);
        self.queue.present(frame);
    }
}

impl App {
    fn size(&self) -> (u32, u32) {
        (self.canvas.width().max(1), self.canvas.height().max(1))
    }

    fn scene(&self) -> Scene<'_> {
        Scene {
            atlas: &self.atlas,
            grid: Some(&self.grid),
            sheets: &self.sheets,
            camera: &self.camera,
            hover: self.hover,
            open: self.open,
            theme: READING_ROOM,
        }
    }

    fn render(&mut self) {
        let (w, h) = self.size();
        self.gpu.resize(w, h);
        self.camera.size = [w as f64, h as f64];
        let need = (w * h * 4) as usize;
        if self.pixels.len() != need {
            self.pixels = vec![0; need];
        }
        let mut pixels = std::mem::take(&mut self.pixels);
        let stats = raster::draw(&self.scene(), &mut pixels, w as usize, h as usize);
        self.gpu.present(&pixels, w, h);
        self.pixels = pixels;
        self.frames += 1;
        self.sheets.touch(&stats.used, self.frames);
        set_state("frames", &self.frames.to_string());
        if !self.first_full && stats.wanted.is_empty() {
            // The first frame with everything on screen drawn as it should be (for benchmarks).
            self.first_full = true;
            if let Some(perf) = web_sys::window().and_then(|w| w.performance()) {
                set_state("firstFull", &format!("{:.1}", perf.now()));
            }
        }
        self.update_axis();
        self.update_labels();
        set_state(
            "level",
            if stats.thumbnails > 0 {
                "thumbnails"
            } else {
                "marks"
            },
        );
        self.last = stats;
    }

    /// The item under a screen point, if the pointer is on its square (or within a few pixels of a mark).
    fn pick(&self, s: [f64; 2]) -> Option<usize> {
        let m = self.camera.to_map(s);
        let (i, _) = self.picker.nearest(m)?;
        let r = self.scene().item_rect(i);
        let slack = 4.0;
        (s[0] >= r[0] - slack
            && s[0] <= r[2] + slack
            && s[1] >= r[1] - slack
            && s[1] <= r[3] + slack)
            .then_some(i)
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
        let css = self.canvas.client_width().max(1) as f64 / self.canvas.width().max(1) as f64;
        let v = self.camera.visible(0.0);
        let label = doc.create_element("span").unwrap();
        label.set_class_name("label");
        label.set_text_content(Some(&axis.label));
        let _ = bar.append_child(&label);
        let mut ticks = crate::atlas::axis_ticks(axis, v[0], v[2]);
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

    /// Cluster labels over the similarity map while it is zoomed out (the larger clusters only).
    fn update_labels(&self) {
        let Some(layer) = by_id("labels") else { return };
        layer.set_text_content(None);
        let map = &self.atlas.maps[self.atlas.current];
        let Some(c) = &self.atlas.manifest.clusters else {
            return;
        };
        if map.name != "similarity" || self.last.thumbnails > 0 {
            return;
        }
        let doc = document();
        let css = self.canvas.client_width().max(1) as f64 / self.canvas.width().max(1) as f64;
        let min_size = (self.atlas.n as u64 / 100).max(2);
        // Largest clusters first; a label that would overlap one already placed is left out.
        let mut placed: Vec<[f64; 4]> = Vec::new();
        for info in c.list.iter().filter(|i| i.size >= min_size).take(40) {
            let s = self.camera.to_screen(info.position);
            if s[0] < 0.0 || s[1] < 0.0 || s[0] > self.camera.size[0] || s[1] > self.camera.size[1]
            {
                continue;
            }
            let text: String = info
                .label
                .split(" · ")
                .take(2)
                .collect::<Vec<_>>()
                .join(" · ");
            let (cx, cy) = (s[0] * css, s[1] * css);
            let half_w = text.chars().count() as f64 * 3.3 + 6.0;
            let rect = [cx - half_w, cy - 10.0, cx + half_w, cy + 10.0];
            if placed
                .iter()
                .any(|r| r[0] < rect[2] && rect[0] < r[2] && r[1] < rect[3] && rect[1] < r[3])
            {
                continue;
            }
            placed.push(rect);
            let t: HtmlElement = doc.create_element("span").unwrap().dyn_into().unwrap();
            t.set_text_content(Some(&text));
            t.set_title(&format!("{} ({} items)", info.label, info.size));
            let _ = t
                .style()
                .set_property("left", &format!("{:.1}px", s[0] * css));
            let _ = t
                .style()
                .set_property("top", &format!("{:.1}px", s[1] * css));
            let _ = layer.append_child(&t);
        }
    }

    fn zoom_limits(&self) -> [f64; 2] {
        [
            self.base_zoom * crate::camera::MIN_ZOOM_FACTOR,
            self.base_zoom * crate::camera::MAX_ZOOM_FACTOR,
        ]
    }
}

fn request_frame() {
    let Some(app) = app() else { return };
    if app.borrow().frame_pending {
        return;
    }
    app.borrow_mut().frame_pending = true;
    let cb = Closure::once_into_js(move || {
        if let Some(app) = self::app() {
            let wanted = {
                let mut a = app.borrow_mut();
                a.frame_pending = false;
                a.render();
                a.last.wanted.clone()
            };
            fetch_sheets(wanted);
        }
    });
    let _ = web_sys::window()
        .unwrap()
        .request_animation_frame(cb.unchecked_ref());
}

/// Starts fetching sheets that visible items want, a few at a time.
fn fetch_sheets(wanted: Vec<(usize, usize)>) {
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
            if let Some(app) = self::app() {
                let mut a = app.borrow_mut();
                a.fetching.remove(&(level, index));
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
            request_frame();
        });
    }
}

fn open_card(i: Option<usize>) {
    let Some(app) = app() else { return };
    app.borrow_mut().open = i;
    let Some(card) = by_id("card") else { return };
    let Some(i) = i else {
        card.set_hidden(true);
        set_state("card", "");
        request_frame();
        return;
    };
    let a = app.borrow();
    let doc = document();
    card.set_text_content(None);
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
    let nb = a.atlas.neighbours_of(i);
    if !nb.is_empty() {
        let h = doc.create_element("h3").unwrap();
        h.set_text_content(Some("Nearest neighbours"));
        let _ = card.append_child(&h);
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
    card.set_hidden(false);
    set_state("card", a.atlas.id(i));
    drop(a);
    request_frame();
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
    if let Some(app) = app() {
        let mut a = app.borrow_mut();
        let at = at.unwrap_or([a.camera.size[0] / 2.0, a.camera.size[1] / 2.0]);
        let limits = a.zoom_limits();
        a.camera.zoom_at(at, factor, limits);
    }
    request_frame();
}

fn fit() {
    if let Some(app) = app() {
        let mut a = app.borrow_mut();
        let (w, h) = a.size();
        a.camera = Camera::fit(a.atlas.bounds, [w as f64, h as f64]);
    }
    request_frame();
}

/// Shows map `i` (fitted to the window).
fn set_map(i: usize) {
    let Some(app) = app() else { return };
    {
        let mut a = app.borrow_mut();
        if i >= a.atlas.maps.len() {
            return;
        }
        a.atlas.select_map(i);
        a.picker = Picker::new(&a.atlas.positions);
        a.grid = Grid::new(&a.atlas.positions, a.atlas.bounds, GRID_ITEMS_PER_CELL);
        let (w, h) = a.size();
        a.camera = Camera::fit(a.atlas.bounds, [w as f64, h as f64]);
        a.base_zoom = a.camera.zoom;
        a.hover = None;
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

fn install_events(canvas: &HtmlCanvasElement) {
    let c = canvas.clone();
    listen(
        canvas,
        "pointerdown",
        false,
        move |e: web_sys::PointerEvent| {
            let p = pointer_pos(&c, e.client_x() as f64, e.client_y() as f64);
            let _ = c.set_pointer_capture(e.pointer_id());
            if let Some(app) = app() {
                let mut a = app.borrow_mut();
                a.pointers.insert(e.pointer_id(), p);
                if a.pointers.len() == 2 {
                    let v: Vec<[f64; 2]> = a.pointers.values().copied().collect();
                    a.pinch =
                        Some(((v[0][0] - v[1][0]).powi(2) + (v[0][1] - v[1][1]).powi(2)).sqrt());
                    a.drag = None;
                } else {
                    a.drag = Some(Drag {
                        start: p,
                        last: p,
                        moved: false,
                    });
                }
            }
        },
    );
    let c = canvas.clone();
    listen(
        canvas,
        "pointermove",
        false,
        move |e: web_sys::PointerEvent| {
            let p = pointer_pos(&c, e.client_x() as f64, e.client_y() as f64);
            let Some(app) = app() else { return };
            let mut hover_query = None;
            {
                let mut a = app.borrow_mut();
                if a.pointers.contains_key(&e.pointer_id()) {
                    a.pointers.insert(e.pointer_id(), p);
                }
                if a.pointers.len() == 2 {
                    let v: Vec<[f64; 2]> = a.pointers.values().copied().collect();
                    let d = ((v[0][0] - v[1][0]).powi(2) + (v[0][1] - v[1][1]).powi(2)).sqrt();
                    if let Some(prev) = a.pinch {
                        let mid = [(v[0][0] + v[1][0]) / 2.0, (v[0][1] + v[1][1]) / 2.0];
                        let limits = a.zoom_limits();
                        a.camera.zoom_at(mid, d / prev.max(1.0), limits);
                    }
                    a.pinch = Some(d);
                } else if let Some(drag) = a.drag.as_mut() {
                    let (dx, dy) = (p[0] - drag.last[0], p[1] - drag.last[1]);
                    drag.last = p;
                    if (p[0] - drag.start[0]).abs() + (p[1] - drag.start[1]).abs() > 4.0 {
                        drag.moved = true;
                    }
                    if drag.moved {
                        a.camera.pan(dx, dy);
                    }
                } else {
                    hover_query = Some(p);
                }
            }
            match hover_query {
                Some(p) => {
                    let i = app.borrow().pick(p);
                    set_hover(i);
                }
                None => request_frame(),
            }
        },
    );
    let c = canvas.clone();
    listen(
        canvas,
        "pointerup",
        false,
        move |e: web_sys::PointerEvent| {
            let p = pointer_pos(&c, e.client_x() as f64, e.client_y() as f64);
            let Some(app) = app() else { return };
            let click = {
                let mut a = app.borrow_mut();
                a.pointers.remove(&e.pointer_id());
                if a.pointers.len() < 2 {
                    a.pinch = None;
                }
                let drag = a.drag.take();
                drag.is_some_and(|d| !d.moved)
            };
            if click {
                let i = app.borrow().pick(p);
                open_card(i);
            }
        },
    );
    listen(
        canvas,
        "pointercancel",
        false,
        move |e: web_sys::PointerEvent| {
            if let Some(app) = app() {
                let mut a = app.borrow_mut();
                a.pointers.remove(&e.pointer_id());
                a.drag = None;
                a.pinch = None;
            }
        },
    );
    listen(
        canvas,
        "pointerleave",
        false,
        move |_e: web_sys::PointerEvent| set_hover(None),
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
            if e.ctrl_key() || e.meta_key() || e.alt_key() {
                return;
            }
            let step = 80.0;
            let pan = |dx: f64, dy: f64| {
                if let Some(app) = app() {
                    app.borrow_mut().camera.pan(dx, dy);
                }
                request_frame();
            };
            match e.key().as_str() {
                "+" | "=" => zoom_by(1.4, None),
                "-" | "_" => zoom_by(1.0 / 1.4, None),
                "0" | "f" => fit(),
                "ArrowLeft" => pan(step, 0.0),
                "ArrowRight" => pan(-step, 0.0),
                "ArrowUp" => pan(0.0, step),
                "ArrowDown" => pan(0.0, -step),
                "Escape" => open_card(None),
                "m" => {
                    if let Some(app) = app() {
                        let next = {
                            let a = app.borrow();
                            (a.atlas.current + 1) % a.atlas.maps.len()
                        };
                        set_map(next);
                    }
                }
                _ => return,
            }
            e.prevent_default();
        },
    );
    let c = canvas.clone();
    listen(&window, "resize", true, move |_e: web_sys::Event| {
        resize_canvas(&c);
        request_frame();
    });
    for (id, f) in [("zoom-in", 0u8), ("zoom-out", 1), ("fit", 2)] {
        if let Some(b) = by_id(id) {
            listen(&b, "click", true, move |_e: web_sys::MouseEvent| match f {
                0 => zoom_by(1.4, None),
                1 => zoom_by(1.0 / 1.4, None),
                _ => fit(),
            });
        }
    }
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
    // What the first picture needs comes first; ids, neighbour lists and catalogue columns are
    // fetched while the map is already on screen.
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
    drop(got);
    let gpu = init_gpu(&canvas).await?;
    set_state("renderer", &gpu.renderer);
    let picker = Picker::new(&atlas.positions);
    let grid = Grid::new(&atlas.positions, atlas.bounds, GRID_ITEMS_PER_CELL);
    let camera = Camera::fit(
        atlas.bounds,
        [canvas.width() as f64, canvas.height() as f64],
    );
    let sheets = SheetStore::from_manifest(&atlas.manifest);
    if let Some(t) = by_id("atlas-title") {
        t.set_text_content(Some(&atlas.manifest.title));
    }
    document().set_title(&format!("{} — Vitrine", atlas.manifest.title));
    if let Some(panel) = by_id("about") {
        let doc = document();
        let h = doc.create_element("h2").unwrap();
        h.set_text_content(Some(&format!("About {}", atlas.manifest.title)));
        let _ = panel.append_child(&h);
        for (heading, lines) in crate::atlas::about(&atlas.manifest) {
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
    let base_zoom = camera.zoom;
    let app = App {
        canvas: canvas.clone(),
        gpu,
        atlas,
        sheets,
        picker,
        grid,
        camera,
        pixels: Vec::new(),
        hover: None,
        open: None,
        drag: None,
        pointers: HashMap::new(),
        pinch: None,
        frame_pending: false,
        fetching: HashSet::new(),
        frames: 0,
        last: Default::default(),
        base_zoom,
        first_full: false,
    };
    APP.with(|a| *a.borrow_mut() = Some(Rc::new(RefCell::new(app))));
    install_events(&canvas);
    if let Some(l) = by_id("loading") {
        l.set_hidden(true);
    }
    request_frame();
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
    let got = fetch_many(&base, &later).await?;
    app.borrow_mut()
        .atlas
        .complete(&got)
        .map_err(|e| e.to_string())?;
    if let Some(c) = by_id("atlas-count") {
        c.set_text_content(Some(&format!("{count} items")));
    }
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
    serde_json::json!({
        "renderer": a.gpu.renderer,
        "items": a.atlas.n,
        "zoom": a.camera.zoom / a.base_zoom,
        "side_px": a.last.side_px,
        "marks": a.last.marks,
        "thumbnails": a.last.thumbnails,
        "visited": a.last.visited,
        "frames": a.frames,
        "sheets_loaded": loaded,
        "sheet_bytes": a.sheets.bytes,
        "sheets_evicted": a.sheets.evicted,
        "fetching": a.fetching.len(),
        "map": a.atlas.maps[a.atlas.current].name,
        "wasm_bytes": wasm_bindgen::memory()
            .dyn_into::<js_sys::WebAssembly::Memory>()
            .map(|m| m.buffer().dyn_into::<js_sys::ArrayBuffer>().map(|b| b.byte_length()).unwrap_or(0))
            .unwrap_or(0),
        "maps": a.atlas.maps.iter().map(|m| m.name.clone()).collect::<Vec<_>>(),
    })
    .to_string()
}

/// For tests and scripts: zooms by `factor` about the canvas centre and draws at once.
#[wasm_bindgen]
pub fn zoom_view(factor: f64) {
    zoom_by(factor, None);
    if let Some(app) = app() {
        app.borrow_mut().render();
    }
}

/// For tests and scripts: moves the view by (dx, dy) canvas pixels, draws at once, and starts
/// fetching the sheets the new view wants.
#[wasm_bindgen]
pub fn pan_view(dx: f64, dy: f64) {
    let Some(app) = app() else { return };
    let wanted = {
        let mut a = app.borrow_mut();
        a.camera.pan(dx, dy);
        a.render();
        a.last.wanted.clone()
    };
    fetch_sheets(wanted);
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

/// For tests and scripts: shows the map with this name and draws at once; false when there is none.
#[wasm_bindgen]
pub fn show_map(name: &str) -> bool {
    let Some(app) = app() else { return false };
    let i = app.borrow().atlas.maps.iter().position(|m| m.name == name);
    match i {
        Some(i) => {
            set_map(i);
            app.borrow_mut().render();
            true
        }
        None => false,
    }
}
