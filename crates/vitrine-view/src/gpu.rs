//! Shows a finished frame (the RGBA buffer the raster drew) through wgpu: one texture upload and
//! one full-screen triangle that copies texels to the target unchanged. The page draws into its
//! canvas with it (the web crate's surface); [`Offscreen`] draws into a texture and reads it back,
//! for the native golden-image tests on software adapters.

/// Copies texel (x, y) of the frame to pixel (x, y) of the target: no filtering, no scaling.
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

pub struct Presenter {
    pipeline: wgpu::RenderPipeline,
    layout: wgpu::BindGroupLayout,
    /// The frame texture's format: sRGB exactly when the target's is, so that texel values pass
    /// through unchanged.
    texture_format: wgpu::TextureFormat,
    frame: Option<(wgpu::Texture, wgpu::BindGroup, u32, u32)>,
}

impl Presenter {
    pub fn new(device: &wgpu::Device, target: wgpu::TextureFormat) -> Presenter {
        let texture_format = if target.is_srgb() {
            wgpu::TextureFormat::Rgba8UnormSrgb
        } else {
            wgpu::TextureFormat::Rgba8Unorm
        };
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
                    format: target,
                    blend: None,
                    write_mask: wgpu::ColorWrites::ALL,
                })],
            }),
            multiview_mask: None,
            cache: None,
        });
        Presenter {
            pipeline,
            layout,
            texture_format,
            frame: None,
        }
    }

    /// Uploads `pixels` (RGBA, `w` x `h`) and draws them into `target`, which must be `w` x `h`.
    pub fn draw(
        &mut self,
        device: &wgpu::Device,
        queue: &wgpu::Queue,
        pixels: &[u8],
        w: u32,
        h: u32,
        target: &wgpu::TextureView,
    ) {
        if !matches!(&self.frame, Some((_, _, fw, fh)) if *fw == w && *fh == h) {
            let texture = texture_2d(
                device,
                "frame",
                (w, h),
                self.texture_format,
                wgpu::TextureUsages::TEXTURE_BINDING | wgpu::TextureUsages::COPY_DST,
            );
            let view = texture.create_view(&Default::default());
            let bind = device.create_bind_group(&wgpu::BindGroupDescriptor {
                label: Some("frame"),
                layout: &self.layout,
                entries: &[wgpu::BindGroupEntry {
                    binding: 0,
                    resource: wgpu::BindingResource::TextureView(&view),
                }],
            });
            self.frame = Some((texture, bind, w, h));
        }
        let (texture, bind, _, _) = self.frame.as_ref().expect("the frame texture");
        queue.write_texture(
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
        let mut enc = device.create_command_encoder(&Default::default());
        {
            let mut pass = enc.begin_render_pass(&wgpu::RenderPassDescriptor {
                label: Some("frame"),
                color_attachments: &[Some(wgpu::RenderPassColorAttachment {
                    view: target,
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
        queue.submit([enc.finish()]);
    }
}

/// Frames drawn through [`Presenter`] into an offscreen texture and read back.
pub struct Offscreen {
    device: wgpu::Device,
    queue: wgpu::Queue,
    presenter: Presenter,
    target: Option<(wgpu::Texture, u32, u32)>,
    name: String,
    /// The last frame as the GPU drew it (RGBA).
    pub pixels: Vec<u8>,
}

/// The texture format an offscreen target is drawn in.
const OFFSCREEN_FORMAT: wgpu::TextureFormat = wgpu::TextureFormat::Rgba8Unorm;

impl Offscreen {
    pub fn new(device: wgpu::Device, queue: wgpu::Queue, name: String) -> Offscreen {
        let presenter = Presenter::new(&device, OFFSCREEN_FORMAT);
        Offscreen {
            device,
            queue,
            presenter,
            target: None,
            name,
            pixels: Vec::new(),
        }
    }
}

impl crate::present::Present for Offscreen {
    fn present(&mut self, pixels: &[u8], w: u32, h: u32) {
        if !matches!(&self.target, Some((_, tw, th)) if *tw == w && *th == h) {
            let texture = texture_2d(
                &self.device,
                "target",
                (w, h),
                OFFSCREEN_FORMAT,
                wgpu::TextureUsages::RENDER_ATTACHMENT | wgpu::TextureUsages::COPY_SRC,
            );
            self.target = Some((texture, w, h));
        }
        let (target, _, _) = self.target.as_ref().expect("the target texture");
        self.presenter.draw(
            &self.device,
            &self.queue,
            pixels,
            w,
            h,
            &target.create_view(&Default::default()),
        );
        // Rows of a copy out of a texture are padded to 256 bytes.
        let row = (w * 4).div_ceil(256) * 256;
        let out = self.device.create_buffer(&wgpu::BufferDescriptor {
            label: Some("read back"),
            size: (row * h) as u64,
            usage: wgpu::BufferUsages::COPY_DST | wgpu::BufferUsages::MAP_READ,
            mapped_at_creation: false,
        });
        let mut enc = self.device.create_command_encoder(&Default::default());
        enc.copy_texture_to_buffer(
            wgpu::TexelCopyTextureInfo {
                texture: target,
                mip_level: 0,
                origin: wgpu::Origin3d::ZERO,
                aspect: wgpu::TextureAspect::All,
            },
            wgpu::TexelCopyBufferInfo {
                buffer: &out,
                layout: wgpu::TexelCopyBufferLayout {
                    offset: 0,
                    bytes_per_row: Some(row),
                    rows_per_image: Some(h),
                },
            },
            wgpu::Extent3d {
                width: w,
                height: h,
                depth_or_array_layers: 1,
            },
        );
        self.queue.submit([enc.finish()]);
        out.map_async(wgpu::MapMode::Read, .., |r| {
            r.expect("mapping the read-back buffer")
        });
        self.device
            .poll(wgpu::PollType::wait_indefinitely())
            .expect("the GPU finished");
        let padded = out.get_mapped_range(..).expect("the mapped range").to_vec();
        self.pixels.clear();
        for y in 0..h as usize {
            let at = y * row as usize;
            self.pixels
                .extend_from_slice(&padded[at..at + (w * 4) as usize]);
        }
    }
    fn name(&self) -> &str {
        &self.name
    }
}

/// A plain 2-D texture of `size` pixels, one level, one sample.
fn texture_2d(
    device: &wgpu::Device,
    label: &str,
    size: (u32, u32),
    format: wgpu::TextureFormat,
    usage: wgpu::TextureUsages,
) -> wgpu::Texture {
    device.create_texture(&wgpu::TextureDescriptor {
        label: Some(label),
        size: wgpu::Extent3d {
            width: size.0,
            height: size.1,
            depth_or_array_layers: 1,
        },
        mip_level_count: 1,
        sample_count: 1,
        dimension: wgpu::TextureDimension::D2,
        format,
        usage,
        view_formats: &[],
    })
}
