//! An image model the institution chose, as an ONNX file, run on the processor in pure Rust
//! (`tract-onnx`): the engine behind `vitrine build --model FILE.onnx`.
//!
//! What the model is given: each picture's largest thumbnail scaled so that its shorter side is
//! the model's input size and cut to the centred square (the usual preparation of image models),
//! as 32-bit floats in 0..1 less the mean and divided by the standard deviation of each channel
//! (by default the ImageNet figures most image models are trained with), in the layout the model's
//! input names: [batch, 3, height, width] or [batch, height, width, 3]. The input size is the
//! model's own where its input names it, else the one the settings give (default 224).
//!
//! What is taken: the output the settings name, else the model's first. A [batch, values] output is
//! taken as it is; a [batch, channels, height, width] feature map is averaged over its height and
//! width; a [batch, tokens, values] output (a vision transformer's last layer) gives its first
//! token, the class token. The vectors are used as the model gives them (the build's cosine
//! distance does not depend on their length).

use std::path::{Path, PathBuf};

use image::RgbImage;
use rayon::prelude::*;
use tract_onnx::prelude::*;
use tract_onnx::tract_hir::infer::Factoid;

/// How pictures are prepared for a model and its output taken, named in the engine's id (and so
/// in the cached vectors' key): bumped whenever either changes.
const PREPARATION: &str = "preparation 1 (Lanczos-3 cover and centre cut, tract 0.23)";

/// How a model is run.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSettings {
    pub path: PathBuf,
    /// The input's side when the model leaves it open (default 224).
    pub size: Option<u32>,
    /// Per-channel mean and standard deviation subtracted and divided (of values in 0..1).
    pub mean: [f32; 3],
    pub std: [f32; 3],
    /// The output to take (default: the model's first).
    pub output: Option<String>,
    /// Pictures run as one batch.
    pub batch: usize,
}

/// The ImageNet channel means and standard deviations most image models are trained with.
pub const IMAGENET_MEAN: [f32; 3] = [0.485, 0.456, 0.406];
pub const IMAGENET_STD: [f32; 3] = [0.229, 0.224, 0.225];

impl ModelSettings {
    pub fn new(path: PathBuf) -> ModelSettings {
        ModelSettings {
            path,
            size: None,
            mean: IMAGENET_MEAN,
            std: IMAGENET_STD,
            output: None,
            // tract runs a ResNet-18-shaped model fastest one picture at a time (31 images/s against
            // 25 in batches of 2 to 16 on this machine: bench/bench_vectors.py); the cores share
            // the pictures.
            batch: 1,
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Layout {
    ChannelsFirst,
    ChannelsLast,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Take {
    AsIs,
    /// Average over the last two axes of [batch, channels, height, width].
    Pool,
    /// Average over the middle two axes of [batch, height, width, channels] (a channels-last model).
    PoolLast,
    /// The first of [batch, tokens, values].
    FirstToken,
}

/// A loaded model, ready to run.
pub struct OnnxEngine {
    plan: Arc<TypedRunnableModel>,
    id: String,
    dims: usize,
    side: [usize; 2],
    layout: Layout,
    take: Take,
    settings: ModelSettings,
    /// The model file's SHA-256 and size.
    pub sha256: String,
    pub bytes: u64,
}

/// What went wrong with a model file, naming the file.
fn fail(path: &Path, what: impl std::fmt::Display) -> String {
    format!("--model {}: {what}", path.display())
}

impl OnnxEngine {
    /// Reads, checks and optimises the model; runs it once on a blank batch to learn its output.
    pub fn load(settings: &ModelSettings) -> Result<OnnxEngine, String> {
        let path = &settings.path;
        if settings.batch == 0 {
            return Err(fail(path, "the batch must be at least 1"));
        }
        let bytes = std::fs::read(path).map_err(|e| fail(path, e))?;
        let sha256 = vitrine_format::sha256_hex(&bytes);
        let mut model = tract_onnx::onnx()
            .model_for_read(&mut &bytes[..])
            .map_err(|e| fail(path, format!("not a model tract can read as ONNX: {e:#}")))?;
        let inputs = model.input_outlets().map_err(|e| fail(path, e))?.len();
        if inputs != 1 {
            return Err(fail(
                path,
                format!("the model takes {inputs} inputs; an image model takes one, the pictures"),
            ));
        }
        let fact = model.input_fact(0).map_err(|e| fail(path, e))?.clone();
        let dims: Vec<Option<usize>> = fact
            .shape
            .dims()
            .map(|d| d.concretize().and_then(|t| t.as_i64()).map(|v| v as usize))
            .collect();
        let rank = fact.shape.rank().concretize();
        if rank.is_some_and(|r| r != 4) || (rank.is_none() && !dims.is_empty() && dims.len() != 4) {
            return Err(fail(
                path,
                format!(
                    "the model's input has {} axes; an image model takes [batch, 3, height, width] or [batch, height, width, 3]",
                    rank.map_or(dims.len() as i64, |r| r)
                ),
            ));
        }
        let at = |i: usize| dims.get(i).copied().flatten();
        let layout = match (at(1), at(3)) {
            (Some(3), _) => Layout::ChannelsFirst,
            (_, Some(3)) => Layout::ChannelsLast,
            (None, None) => Layout::ChannelsFirst,
            (c, l) => {
                return Err(fail(
                    path,
                    format!(
                        "the model's input is [{}]: neither its second nor its last axis holds 3 colour channels",
                        [at(0), c, at(2), l]
                            .iter()
                            .map(|d| d.map_or("?".to_string(), |d| d.to_string()))
                            .collect::<Vec<_>>()
                            .join(", ")
                    ),
                ))
            }
        };
        let (h, w) = match layout {
            Layout::ChannelsFirst => (at(2), at(3)),
            Layout::ChannelsLast => (at(1), at(2)),
        };
        let given = settings.size.map(|s| s as usize);
        let side = [h.or(given).unwrap_or(224), w.or(given).unwrap_or(224)];
        if let (Some(g), Some(own)) = (given, h.or(w)) {
            if g != own {
                return Err(fail(
                    path,
                    format!(
                        "--model-size {g}: the model's input is {own} px; leave the option out"
                    ),
                ));
            }
        }
        if side[0] == 0 || side[1] == 0 || side[0] > 4096 || side[1] > 4096 {
            return Err(fail(
                path,
                format!("an input of {} x {} px cannot be given", side[1], side[0]),
            ));
        }
        let b = settings.batch;
        let shape = match layout {
            Layout::ChannelsFirst => [b, 3, side[0], side[1]],
            Layout::ChannelsLast => [b, side[0], side[1], 3],
        };
        model
            .set_input_fact(0, f32::fact(shape).into())
            .map_err(|e| fail(path, e))?;
        let outputs: Vec<String> = model
            .output_outlets()
            .map_err(|e| fail(path, e))?
            .iter()
            .map(|o| model.node(o.node).name.clone())
            .collect();
        if let Some(name) = &settings.output {
            if !outputs.contains(name) && model.node_by_name(name).is_err() {
                return Err(fail(
                    path,
                    format!("the model has no output {name:?}; its outputs are {outputs:?}"),
                ));
            }
            model
                .select_outputs_by_name([name.as_str()])
                .map_err(|e| fail(path, e))?;
        } else if outputs.len() > 1 {
            let first = outputs[0].clone();
            model
                .select_outputs_by_name([first.as_str()])
                .map_err(|e| fail(path, e))?;
        }
        let output_name = settings
            .output
            .clone()
            .or_else(|| outputs.first().cloned())
            .unwrap_or_default();
        let plan = model
            .into_optimized()
            .and_then(|m| m.into_runnable())
            .map_err(|e| {
                fail(
                    path,
                    format!("the model cannot be run on {shape:?} pictures: {e:#}"),
                )
            })?;
        let mut engine = OnnxEngine {
            plan,
            id: String::new(),
            dims: 0,
            side,
            layout,
            take: Take::AsIs,
            settings: settings.clone(),
            sha256,
            bytes: bytes.len() as u64,
        };
        // One blank batch tells the output's shape.
        let out = engine.run_batch(&vec![0.0; b * 3 * side[0] * side[1]])?;
        let shape = out.shape().to_vec();
        let (take, dims) = match shape.as_slice() {
            [n, d] if *n == b => (Take::AsIs, *d),
            [n, _, _, c] if *n == b && layout == Layout::ChannelsLast => (Take::PoolLast, *c),
            [n, c, _, _] if *n == b => (Take::Pool, *c),
            [n, t, d] if *n == b && *t >= 1 => (Take::FirstToken, *d),
            _ => {
                return Err(fail(
                    path,
                    format!(
                        "its output {output_name:?} is {shape:?} for a batch of {b}; take an output of [batch, values], [batch, channels, height, width] or [batch, tokens, values] (--model-output NAME; its outputs are {outputs:?})"
                    ),
                ))
            }
        };
        if dims == 0 {
            return Err(fail(
                path,
                format!("its output {output_name:?} holds no values"),
            ));
        }
        engine.take = take;
        engine.dims = dims;
        engine.id = format!(
            "ONNX model {} (SHA-256 {}), input {} x {} {}, mean {:?}, std {:?}, output {:?}{}, {PREPARATION}",
            path.file_name()
                .map(|f| f.to_string_lossy().to_string())
                .unwrap_or_default(),
            engine.sha256,
            side[1],
            side[0],
            match layout {
                Layout::ChannelsFirst => "channels first",
                Layout::ChannelsLast => "channels last",
            },
            settings.mean,
            settings.std,
            output_name,
            match take {
                Take::AsIs => "",
                Take::Pool | Take::PoolLast => " averaged over height and width",
                Take::FirstToken => " first token",
            }
        );
        Ok(engine)
    }

    /// The input side as width x height.
    pub fn input_size(&self) -> [usize; 2] {
        [self.side[1], self.side[0]]
    }

    fn run_batch(&self, data: &[f32]) -> Result<Tensor, String> {
        let b = self.settings.batch;
        let [h, w] = self.side;
        let shape: [usize; 4] = match self.layout {
            Layout::ChannelsFirst => [b, 3, h, w],
            Layout::ChannelsLast => [b, h, w, 3],
        };
        let input = Tensor::from_shape(&shape, data).map_err(|e| fail(&self.settings.path, e))?;
        let mut out = self
            .plan
            .run(tvec!(input.into_tvalue()))
            .map_err(|e| fail(&self.settings.path, format!("running the model: {e:#}")))?;
        let t = out.swap_remove(0).into_tensor();
        t.cast_to::<f32>().map(|c| c.into_owned()).map_err(|e| {
            fail(
                &self.settings.path,
                format!("its output is not numbers: {e:#}"),
            )
        })
    }

    /// A picture as the model's input values, appended to `out`.
    fn prepare(&self, img: &RgbImage, out: &mut Vec<f32>) {
        let [h, w] = self.side;
        let square = cover(img, w as u32, h as u32);
        let (m, s) = (self.settings.mean, self.settings.std);
        let value = |p: &image::Rgb<u8>, c: usize| (p[c] as f32 / 255.0 - m[c]) / s[c];
        match self.layout {
            Layout::ChannelsFirst => {
                for c in 0..3 {
                    out.extend(square.pixels().map(|p| value(p, c)));
                }
            }
            Layout::ChannelsLast => {
                for p in square.pixels() {
                    out.extend((0..3).map(|c| value(p, c)));
                }
            }
        }
    }

    /// The vectors of one batch's output (`used` pictures of it).
    fn vectors(&self, t: &Tensor, used: usize) -> Result<Vec<Vec<f32>>, String> {
        let v = t
            .to_plain_array_view::<f32>()
            .map_err(|e| fail(&self.settings.path, e))?;
        let shape = v.shape().to_vec();
        let flat: Vec<f32> = v.iter().copied().collect();
        let per: usize = shape[1..].iter().product();
        Ok((0..used)
            .map(|i| {
                let item = &flat[i * per..(i + 1) * per];
                match self.take {
                    Take::AsIs => item.to_vec(),
                    Take::FirstToken => item[..self.dims].to_vec(),
                    Take::Pool => {
                        let area = shape[2] * shape[3];
                        item.chunks(area)
                            .map(|c| c.iter().sum::<f32>() / area as f32)
                            .collect()
                    }
                    Take::PoolLast => {
                        let (area, c) = (shape[1] * shape[2], shape[3]);
                        let mut sums = vec![0f32; c];
                        for px in item.chunks(c) {
                            sums.iter_mut().zip(px).for_each(|(s, v)| *s += v);
                        }
                        sums.iter().map(|s| s / area as f32).collect()
                    }
                }
            })
            .collect())
    }
}

/// The picture scaled so that it covers `w` x `h` (Lanczos-3), cut to its centre.
fn cover(img: &RgbImage, w: u32, h: u32) -> RgbImage {
    use fast_image_resize as fr;
    let (iw, ih) = img.dimensions();
    if (iw, ih) == (w, h) {
        return img.clone();
    }
    let scale = (w as f64 / iw.max(1) as f64).max(h as f64 / ih.max(1) as f64);
    let sw = ((iw as f64 * scale).round() as u32).max(w);
    let sh = ((ih as f64 * scale).round() as u32).max(h);
    let mut dst = fr::images::Image::new(sw, sh, fr::PixelType::U8x3);
    let src = fr::images::ImageRef::new(iw, ih, img.as_raw(), fr::PixelType::U8x3)
        .expect("an RGB8 buffer of its own size");
    fr::Resizer::new()
        .resize(
            &src,
            &mut dst,
            &fr::ResizeOptions::new()
                .resize_alg(fr::ResizeAlg::Convolution(fr::FilterType::Lanczos3)),
        )
        .expect("RGB8 to RGB8 resizing has no failure case");
    let scaled = RgbImage::from_raw(sw, sh, dst.into_vec()).expect("the resizer fills the image");
    image::imageops::crop_imm(&scaled, (sw - w) / 2, (sh - h) / 2, w, h).to_image()
}

impl crate::embed::Engine for OnnxEngine {
    fn id(&self) -> &str {
        &self.id
    }
    fn dims(&self) -> usize {
        self.dims
    }
    fn batch(&self) -> usize {
        self.settings.batch
    }
    fn describe(&self, pictures: &[&RgbImage]) -> Result<Vec<Vec<f32>>, String> {
        let b = self.settings.batch;
        let per = 3 * self.side[0] * self.side[1];
        let parts: Vec<Result<Vec<Vec<f32>>, String>> = pictures
            .par_chunks(b)
            .map(|chunk| {
                let mut data = Vec::with_capacity(b * per);
                for p in chunk {
                    self.prepare(p, &mut data);
                }
                // The last batch is filled out with zeros; their vectors are not kept.
                data.resize(b * per, 0.0);
                let out = self.run_batch(&data)?;
                self.vectors(&out, chunk.len())
            })
            .collect();
        let mut all = Vec::with_capacity(pictures.len());
        for p in parts {
            all.extend(p?);
        }
        Ok(all)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cover_cuts_the_centre_of_a_scaled_picture() {
        let img = RgbImage::from_fn(200, 100, |x, _| {
            image::Rgb([if x < 50 { 255 } else { 0 }, 0, 0])
        });
        let c = cover(&img, 50, 50);
        assert_eq!(c.dimensions(), (50, 50));
        // Scaled to 100 x 50, the centre 50 x 50 starts at x = 25: the red quarter (x < 25) is cut off.
        assert!(c.get_pixel(2, 25)[0] < 30);
        let same = RgbImage::from_pixel(50, 50, image::Rgb([1, 2, 3]));
        assert_eq!(cover(&same, 50, 50), same);
    }

    #[test]
    fn a_file_that_is_not_a_model_is_named() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("model.onnx");
        std::fs::write(&p, b"not a model").unwrap();
        let e = OnnxEngine::load(&ModelSettings::new(p)).err().unwrap();
        assert!(
            e.contains("model.onnx") && e.contains("not a model tract can read"),
            "{e}"
        );
        let missing = dir.path().join("missing.onnx");
        let e = OnnxEngine::load(&ModelSettings::new(missing))
            .err()
            .unwrap();
        assert!(e.contains("missing.onnx"), "{e}");
    }
}
