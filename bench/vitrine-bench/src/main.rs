//! `vitrine-bench`: times one stage of the map engine on a .npy file, for `./build.sh bench-map`.
//! Prints one JSON line with the timing; writes the result as .npy for the reference comparison.

// The map engine allocates and frees large buffers every round; this allocator, told to by
// `keep_freed_memory`, keeps them mapped instead of handing them back to the system and
// faulting them in again.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

mod synth;

use std::path::PathBuf;
use std::time::Instant;

use vitrine_map::knn::Metric;
use vitrine_map::matrix::Matrix;

fn main() -> anyhow::Result<()> {
    vitrine_cli::keep_freed_memory();
    let args: Vec<String> = std::env::args().collect();
    if args.get(1).map(String::as_str) == Some("images") {
        return images(&args[2..]);
    }
    if args.get(1).map(String::as_str) == Some("atlas") {
        return synth::run(&args[2..]);
    }
    let usage = "usage: vitrine-bench knn|map VECTORS.npy OUT.npy [cosine|euclidean] [k] [sequential|parallel]\n       vitrine-bench images IMAGES_DIR OUT_DIR [long side, default 512]";
    let (stage, input, out) = match (args.get(1), args.get(2), args.get(3)) {
        (Some(s), Some(i), Some(o)) => (s.as_str(), PathBuf::from(i), PathBuf::from(o)),
        _ => anyhow::bail!(usage),
    };
    let metric = match args.get(4).map(String::as_str) {
        Some("euclidean") => Metric::Euclidean,
        _ => Metric::Cosine,
    };
    let k: usize = args.get(5).map(|s| s.parse()).transpose()?.unwrap_or(15);
    let t0 = Instant::now();
    let x: Matrix = vitrine_build::vectors::read_vectors(&input)?;
    let read_s = t0.elapsed().as_secs_f64();
    let t1 = Instant::now();
    let mut params = vitrine_map::nndescent::NnDescentParams::new(k, 42);
    // Tuning knobs for experiments: VITRINE_NND="trees,leaf,rounds,sample_rate[,min_recall[,delta]]".
    if let Ok(v) = std::env::var("VITRINE_NND") {
        let f: Vec<f64> = v.split(',').map(|x| x.parse().unwrap()).collect();
        params.trees = f[0] as usize;
        params.leaf_size = f[1] as usize;
        params.max_rounds = f[2] as usize;
        params.sample_rate = f[3];
        if let Some(&r) = f.get(4) {
            params.min_recall = r;
        }
        if let Some(&d) = f.get(5) {
            params.delta = d;
        }
    }
    let g = vitrine_map::nndescent::nn_descent(&x, metric, &params, &|_, _, _| {});
    let knn_s = t1.elapsed().as_secs_f64();
    match stage {
        "knn" => {
            // A second run in the same process, as the reference's warm run is its second call:
            // the processor, the allocator and the page tables are then warm for both tools.
            let t = Instant::now();
            let again = vitrine_map::nndescent::nn_descent(&x, metric, &params, &|_, _, _| {});
            let warm_s = t.elapsed().as_secs_f64();
            anyhow::ensure!(
                again.ids == g.ids,
                "two runs with one seed gave different graphs"
            );
            let ids: Vec<f32> = g.ids.iter().map(|&i| i as f32).collect();
            std::fs::write(&out, vitrine_format::npy::encode_f32(x.rows, g.k, &ids))?;
            println!(
                "{{\"stage\":\"knn\",\"read_s\":{read_s:.3},\"first_s\":{knn_s:.3},\"knn_s\":{warm_s:.3}}}"
            );
        }
        "map" => {
            let t2 = Instant::now();
            let fuzzy = vitrine_map::umap::fuzzy_graph(&g);
            let fuzzy_s = t2.elapsed().as_secs_f64();
            let pca = vitrine_map::umap::pca_start(
                &vitrine_map::knn::prepare(&x, metric),
                &mut vitrine_map::rng::Rng::new(42),
            );
            let pca_s = t2.elapsed().as_secs_f64() - fuzzy_s;
            // Knobs for experiments: VITRINE_START_TOL (the spectral start's residual),
            // VITRINE_EPOCHS (the layout's epochs), VITRINE_LR (its initial learning rate).
            let knob = |name: &str| std::env::var(name).ok().map(|v| v.parse::<f64>());
            let (start, report) = match knob("VITRINE_START_TOL").transpose()? {
                Some(tol) => vitrine_map::spectral::spectral_start_to(&fuzzy, &pca, 42, tol),
                None => vitrine_map::spectral::spectral_start(&fuzzy, &pca, 42),
            };
            eprintln!("start: {report:?}; PCA start {pca_s:.3} s");
            let start_s = t2.elapsed().as_secs_f64() - fuzzy_s;
            let parallel = args.get(6).map(String::as_str) != Some("sequential");
            // The layout's seed, for measuring how much a figure varies from seed to seed.
            let seed = std::env::var("VITRINE_SEED")
                .ok()
                .map(|s| s.parse())
                .transpose()?
                .unwrap_or(42);
            let params = vitrine_map::umap::UmapParams {
                parallel,
                seed,
                epochs: knob("VITRINE_EPOCHS").transpose()?.map(|e| e as usize),
                learning_rate: knob("VITRINE_LR").transpose()?.unwrap_or(1.0) as f32,
                ..Default::default()
            };
            let pos = vitrine_map::umap::layout(&fuzzy, start, &params, &|_, _| {});
            let layout_s = t2.elapsed().as_secs_f64();
            let flat: Vec<f32> = pos.iter().flatten().copied().collect();
            std::fs::write(&out, vitrine_format::npy::encode_f32(x.rows, 2, &flat))?;
            println!(
                "{{\"stage\":\"map\",\"read_s\":{read_s:.3},\"knn_s\":{knn_s:.3},\"fuzzy_s\":{fuzzy_s:.3},\"start_s\":{start_s:.3},\"layout_s\":{layout_s:.3},\"total_s\":{:.3}}}",
                knn_s + layout_s
            );
        }
        _ => anyhow::bail!(usage),
    }
    Ok(())
}

/// Thumbnails every file of a folder to one JPEG each (quality 85, `long side` px), on all cores:
/// the same job as the reference thumbnailers get. Prints one JSON line.
fn images(args: &[String]) -> anyhow::Result<()> {
    use rayon::prelude::*;
    let (src, out) = match (args.first(), args.get(1)) {
        (Some(s), Some(o)) => (PathBuf::from(s), PathBuf::from(o)),
        _ => anyhow::bail!("usage: vitrine-bench images IMAGES_DIR OUT_DIR [long side]"),
    };
    let long: u32 = args.get(2).map(|s| s.parse()).transpose()?.unwrap_or(512);
    std::fs::create_dir_all(&out)?;
    let mut files: Vec<PathBuf> = std::fs::read_dir(&src)?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file() && !p.file_name().unwrap().to_string_lossy().starts_with('.'))
        .collect();
    files.sort();
    let t = Instant::now();
    let failed: usize = files
        .par_iter()
        .map(|p| -> anyhow::Result<usize> {
            let bytes = std::fs::read(p)?;
            match vitrine_images::thumbs::thumbnail(
                &bytes,
                vitrine_images::decode::DEFAULT_MAX_PIXELS,
                long,
            ) {
                Ok((img, _)) => {
                    let jpeg = vitrine_images::thumbs::encode_jpeg(&img, 85)?;
                    let name = p.file_stem().unwrap().to_string_lossy().to_string() + ".jpg";
                    std::fs::write(out.join(name), jpeg)?;
                    Ok(0)
                }
                Err(e) => {
                    eprintln!("{}: {e}", p.display());
                    Ok(1)
                }
            }
        })
        .sum::<anyhow::Result<usize>>()?;
    let secs = t.elapsed().as_secs_f64();
    println!(
        "{{\"stage\":\"images\",\"images\":{},\"failed\":{failed},\"seconds\":{secs:.3},\"per_second\":{:.2},\"threads\":{}}}",
        files.len(),
        files.len() as f64 / secs,
        rayon::current_num_threads()
    );
    Ok(())
}
