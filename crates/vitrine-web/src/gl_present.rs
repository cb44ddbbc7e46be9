//! The frame into a WebGL2 canvas without wgpu's swapchain copy.
//!
//! wgpu's WebGL2 surface draws into a texture of its own and, at `Queue::present`, copies that
//! texture into the canvas's drawing buffer (wgpu-hal 30, `gles/web.rs`, `Surface::present`: a
//! `blitFramebuffer` with a vertical flip, or a full-screen draw for sRGB formats). Our frame is
//! already finished on the processor, so that second full-screen pass is pure cost: on SwiftShader
//! an upload and a draw straight into the canvas take about half of what the same with the copy
//! takes (`./build.sh bench-view`, the plain-WebGL2 floor). Here the frame goes through the WebGL2
//! context wgpu created and owns (reached with `Device::as_hal`): one texture upload and one
//! full-screen triangle into the canvas's own drawing buffer, the rows flipped as they are drawn.
//! The wgpu surface is then never asked for a texture, so it never copies over it.

use glow::HasContext;

const VERTEX: &str = r#"#version 300 es
void main() {
    // One triangle that covers the whole viewport.
    vec2 p = vec2(float((gl_VertexID & 1) * 4 - 1), float((gl_VertexID >> 1) * 4 - 1));
    gl_Position = vec4(p, 0.0, 1.0);
}
"#;

const FRAGMENT: &str = r#"#version 300 es
precision highp float;
uniform highp sampler2D frame;
out vec4 colour;
void main() {
    // The frame's rows run top to bottom, the drawing buffer's bottom to top.
    ivec2 size = textureSize(frame, 0);
    ivec2 p = ivec2(gl_FragCoord.xy);
    colour = texelFetch(frame, ivec2(p.x, size.y - 1 - p.y), 0);
}
"#;

pub struct DirectGl {
    program: glow::Program,
    /// Where the program reads its texture unit.
    frame: Option<glow::UniformLocation>,
    vao: glow::VertexArray,
    texture: glow::Texture,
    size: (u32, u32),
}

/// The WebGL2 context of a wgpu device on the GL backend (None on WebGPU).
fn gl_of<R>(device: &wgpu::Device, f: impl FnOnce(&glow::Context) -> R) -> Option<R> {
    // SAFETY: the context is only used on this thread, between wgpu's own calls, and nothing
    // of wgpu's is destroyed through it. The viewer draws nothing else through wgpu on a device
    // it presents this way; even so, the vertex array wgpu-hal binds once for good is bound
    // again after each draw here, and the rest of the state it uses (program, textures,
    // framebuffer, viewport) wgpu-hal sets before each of its own passes.
    let hal = unsafe { device.as_hal::<wgpu::hal::api::Gles>() }?;
    Some(f(hal.context().lock()))
}

impl DirectGl {
    /// The presenter on `device`'s WebGL2 context; None when the device is not WebGL2 or the
    /// program does not build (then wgpu's surface presents, as before).
    pub fn new(device: &wgpu::Device) -> Option<DirectGl> {
        gl_of(device, |gl| unsafe {
            let program = gl.create_program().ok()?;
            for (kind, source) in [
                (glow::VERTEX_SHADER, VERTEX),
                (glow::FRAGMENT_SHADER, FRAGMENT),
            ] {
                let shader = gl.create_shader(kind).ok()?;
                gl.shader_source(shader, source);
                gl.compile_shader(shader);
                if !gl.get_shader_compile_status(shader) {
                    web_sys::console::warn_1(&gl.get_shader_info_log(shader).into());
                    return None;
                }
                gl.attach_shader(program, shader);
                gl.delete_shader(shader);
            }
            gl.link_program(program);
            if !gl.get_program_link_status(program) {
                web_sys::console::warn_1(&gl.get_program_info_log(program).into());
                return None;
            }
            let vao = gl.create_vertex_array().ok()?;
            let texture = gl.create_texture().ok()?;
            Some(DirectGl {
                frame: gl.get_uniform_location(program, "frame"),
                program,
                vao,
                texture,
                size: (0, 0),
            })
        })
        .flatten()
    }

    /// Uploads `pixels` (RGBA, `w` x `h`, top row first) and draws them into the canvas.
    pub fn present(&mut self, device: &wgpu::Device, pixels: &[u8], w: u32, h: u32) {
        let size = &mut self.size;
        let (program, vao, texture, frame) =
            (self.program, self.vao, self.texture, self.frame.as_ref());
        gl_of(device, |gl| unsafe {
            gl.bind_framebuffer(glow::FRAMEBUFFER, None);
            gl.viewport(0, 0, w as i32, h as i32);
            gl.disable(glow::SCISSOR_TEST);
            gl.disable(glow::BLEND);
            gl.disable(glow::DEPTH_TEST);
            gl.disable(glow::STENCIL_TEST);
            gl.disable(glow::CULL_FACE);
            gl.color_mask(true, true, true, true);
            gl.active_texture(glow::TEXTURE0);
            gl.bind_texture(glow::TEXTURE_2D, Some(texture));
            gl.bind_buffer(glow::PIXEL_UNPACK_BUFFER, None);
            gl.pixel_store_i32(glow::UNPACK_ALIGNMENT, 4);
            gl.pixel_store_i32(glow::UNPACK_ROW_LENGTH, 0);
            let data = glow::PixelUnpackData::Slice(Some(pixels));
            if *size != (w, h) {
                gl.tex_parameter_i32(
                    glow::TEXTURE_2D,
                    glow::TEXTURE_MIN_FILTER,
                    glow::NEAREST as i32,
                );
                gl.tex_parameter_i32(
                    glow::TEXTURE_2D,
                    glow::TEXTURE_MAG_FILTER,
                    glow::NEAREST as i32,
                );
                gl.tex_image_2d(
                    glow::TEXTURE_2D,
                    0,
                    glow::RGBA8 as i32,
                    w as i32,
                    h as i32,
                    0,
                    glow::RGBA,
                    glow::UNSIGNED_BYTE,
                    data,
                );
                *size = (w, h);
            } else {
                gl.tex_sub_image_2d(
                    glow::TEXTURE_2D,
                    0,
                    0,
                    0,
                    w as i32,
                    h as i32,
                    glow::RGBA,
                    glow::UNSIGNED_BYTE,
                    data,
                );
            }
            gl.use_program(Some(program));
            gl.uniform_1_i32(frame, 0);
            let theirs = gl.get_parameter_vertex_array(glow::VERTEX_ARRAY_BINDING);
            gl.bind_vertex_array(Some(vao));
            gl.draw_arrays(glow::TRIANGLES, 0, 3);
            gl.bind_vertex_array(theirs);
            gl.bind_texture(glow::TEXTURE_2D, None);
            gl.use_program(None);
        });
    }
}
