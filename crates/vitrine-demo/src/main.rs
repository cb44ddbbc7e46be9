//! `vitrine-demo`: writes the invented demo archive (images, catalogue, feature vectors).

use std::path::PathBuf;

use clap::Parser;
use indicatif::{ProgressBar, ProgressStyle};

#[derive(Parser)]
#[command(name = "vitrine-demo", about = "Generate the invented demo archive")]
struct Args {
    /// Output folder (images/, records.csv, features.npy, feature-ids.txt).
    #[arg(long)]
    out: PathBuf,
    /// Number of images.
    #[arg(long, default_value_t = 6000)]
    count: usize,
    #[arg(long, default_value_t = 7)]
    seed: u64,
}

fn main() -> anyhow::Result<()> {
    let a = Args::parse();
    let pb = ProgressBar::new(a.count as u64);
    pb.set_style(
        ProgressStyle::with_template("{prefix:>12} [{bar:30}] {pos}/{len} {per_sec} eta {eta}")
            .unwrap()
            .progress_chars("=> "),
    );
    pb.set_prefix("generating");
    vitrine_demo::generate(&a.out, a.count, a.seed, &|c| pb.set_position(c))?;
    pb.finish_and_clear();
    eprintln!("demo archive: {} images in {}", a.count, a.out.display());
    Ok(())
}
