//! Vectors computed from the pictures, when the build is given none: the engine the options name
//! run over every item's largest thumbnail (`vitrine_images::embed`), through the same thumbnail
//! cache the sheets are later made from, so that each master is decoded once.

use std::path::PathBuf;

use anyhow::{anyhow, Result};
use vitrine_images::cache::ThumbCache;
use vitrine_images::embed::{self, Engine};
use vitrine_images::thumbs::SheetPlan;
use vitrine_map::matrix::Matrix;

use crate::options::{BuildOptions, VectorEngine};
use crate::progress::Progress;

/// How the vectors were computed, for the report and the provenance.
#[derive(Debug, Clone)]
pub struct Described {
    /// The engine and its settings, as it names itself.
    pub engine: String,
    pub dims: usize,
    /// Masters decoded to compute vectors (their thumbnails then taken from the cache).
    pub decoded: usize,
    /// Vectors taken from the cache.
    pub reused: usize,
    /// Items whose picture could not be used (they share the placeholder's vector).
    pub failed: usize,
    /// The model file, for the provenance (None: the built-in descriptor).
    pub model: Option<vitrine_format::InputFile>,
}

/// The thumbnail levels, sheet size and limits the options ask for.
pub fn sheet_plan(opts: &BuildOptions) -> SheetPlan {
    SheetPlan {
        cells: opts.cells.clone(),
        sheet: opts.sheet_size,
        quality: opts.jpeg_quality,
        max_pixels: opts.max_pixels,
    }
}

/// The thumbnail cache the options name (None: the build keeps no cache).
pub fn thumb_cache(opts: &BuildOptions, plan: &SheetPlan) -> Option<ThumbCache> {
    opts.thumb_cache.as_ref().map(|d| {
        ThumbCache::new(
            d.clone(),
            *plan.cells.iter().max().expect("at least one level"),
            plan.max_pixels,
        )
    })
}

/// Every item's vector from its picture (`paths[i]`: item i's file, or why it has none).
pub fn compute(
    opts: &BuildOptions,
    paths: &[Result<PathBuf, String>],
    progress: &dyn Progress,
) -> Result<(Matrix, Described)> {
    let plan = sheet_plan(opts);
    let largest = *plan.cells.last().expect("at least one level");
    let mut model = None;
    let engine: Box<dyn Engine> = match &opts.engine {
        VectorEngine::BuiltIn => Box::new(embed::BuiltIn),
        VectorEngine::Model(settings) => {
            let e = vitrine_images::onnx::OnnxEngine::load(settings).map_err(|e| anyhow!(e))?;
            let [w, h] = e.input_size();
            progress.note(&format!("model: {}", e.id()));
            if (w.max(h) as u32) > largest {
                progress.note(&format!(
                    "the model takes {w} x {h} px but the largest thumbnails are {largest} px: pictures are enlarged for it (--levels ending at {} or more gives it sharper ones)",
                    w.max(h)
                ));
            }
            model = Some(vitrine_format::InputFile {
                role: "model".into(),
                path: settings
                    .path
                    .file_name()
                    .map(|f| f.to_string_lossy().to_string())
                    .unwrap_or_default(),
                bytes: e.bytes,
                sha256: e.sha256.clone(),
            });
            Box::new(e)
        }
    };
    vitrine_images::decode::set_decode_budget(opts.decode_memory);
    let cache = thumb_cache(opts, &plan);
    let n = paths.len();
    let bar = progress.bar("vectors from images", n as u64);
    let got = embed::vectors_from_images(paths, &plan, cache.as_ref(), engine.as_ref(), &|c| {
        bar.set(c, n as u64)
    })
    .map_err(|e| {
        anyhow!(
            "computing vectors from the images with {}: {e}",
            engine.id()
        )
    })?;
    drop(bar);
    let described = Described {
        engine: engine.id().to_string(),
        dims: got.dims,
        decoded: got.decoded,
        reused: got.reused,
        failed: got.failed,
        model,
    };
    progress.note(&format!(
        "vectors: {} x {} computed from the images by the {}{}{}",
        n,
        got.dims,
        if described.model.is_some() {
            "model"
        } else {
            described.engine.as_str()
        },
        if got.reused > 0 {
            format!(" ({} taken from the cache)", got.reused)
        } else {
            String::new()
        },
        if got.failed > 0 {
            format!(
                "; {} item(s) without a usable picture share the placeholder's vector",
                got.failed
            )
        } else {
            String::new()
        }
    ));
    if got.cache_errors > 0 {
        progress.note(&format!(
            "{} thumbnail(s) could not be stored in the cache: their pictures are decoded again for the sheets",
            got.cache_errors
        ));
    }
    if cache.is_none() {
        progress.note("without the thumbnail cache, every picture is decoded twice: once for its vector, once for its thumbnails");
    }
    let matrix = Matrix {
        rows: n,
        cols: got.dims,
        data: got.vectors,
    };
    Ok((matrix, described))
}
