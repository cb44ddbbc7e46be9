//! Measures the built-in descriptor on a labelled folder: 10-NN label accuracy (leave one out,
//! exact neighbours by Euclidean distance on the unit vectors) for the descriptor and for each
//! block alone. Run: cargo run --release -p vitrine-images --example describe_eval -- DIR [w0 w1 w2 w3]
//! (DIR holds images/ID.jpg and catalogue.csv with id,label).
use rayon::prelude::*;
use vitrine_images::describe;

fn accuracy(v: &[Vec<f32>], labels: &[String]) -> f64 {
    let n = v.len();
    let right: usize = (0..n)
        .into_par_iter()
        .filter(|&i| {
            let mut d: Vec<(f32, usize)> = (0..n)
                .filter(|&j| j != i)
                .map(|j| {
                    (
                        v[i].iter().zip(&v[j]).map(|(a, b)| (a - b) * (a - b)).sum(),
                        j,
                    )
                })
                .collect();
            d.sort_by(|a, b| a.partial_cmp(b).unwrap());
            let near: Vec<&String> = d[..10].iter().map(|&(_, j)| &labels[j]).collect();
            let count = |l: &String| near.iter().filter(|&&x| x == l).count();
            let top = near.iter().map(|l| count(l)).max().unwrap();
            let vote = near.iter().find(|l| count(l) == top).unwrap();
            *vote == &labels[i]
        })
        .count();
    right as f64 / n as f64
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let dir = std::path::Path::new(&args[1]);
    let text = std::fs::read_to_string(dir.join("catalogue.csv")).unwrap();
    let rows: Vec<(String, String)> = text
        .lines()
        .skip(1)
        .map(|l| {
            let (a, b) = l.split_once(',').unwrap();
            (a.to_string(), b.trim_matches('"').to_string())
        })
        .collect();
    let t = std::time::Instant::now();
    let blocks: Vec<[Vec<f32>; 4]> = rows
        .par_iter()
        .map(|(id, _)| {
            let bytes = std::fs::read(dir.join("images").join(format!("{id}.jpg"))).unwrap();
            let (thumb, _) = vitrine_images::thumbs::thumbnail(&bytes, 1 << 28, 512).unwrap();
            describe::blocks(&thumb)
        })
        .collect();
    let secs = t.elapsed().as_secs_f64();
    let labels: Vec<String> = rows.iter().map(|r| r.1.clone()).collect();
    if args.get(2).map(String::as_str) == Some("grid") {
        // Every weighting of a small grid (the edge block's weight fixed at 1).
        for w0 in [0.3f32, 0.5, 0.7, 1.0] {
            for w1 in [0.2f32, 0.3, 0.5, 1.0] {
                for w3 in [0.3f32, 0.5, 0.7, 1.0] {
                    let w = [w0, w1, 1.0, w3];
                    let all: Vec<Vec<f32>> =
                        blocks.iter().map(|b| describe::combine(b, &w)).collect();
                    println!("{w0} {w1} 1 {w3} {:.4}", accuracy(&all, &labels));
                }
            }
        }
        return;
    }
    let w: [f32; 4] = if args.len() >= 6 {
        [0, 1, 2, 3].map(|i| args[2 + i].parse().unwrap())
    } else {
        [1.0, 1.0, 1.0, 0.6]
    };
    let all: Vec<Vec<f32>> = blocks.iter().map(|b| describe::combine(b, &w)).collect();
    println!(
        "{} items, {:.0} images/s (decode + thumbnail + blocks); weights {w:?}: accuracy {:.4}",
        rows.len(),
        rows.len() as f64 / secs,
        accuracy(&all, &labels)
    );
    for b in 0..4 {
        let one: Vec<Vec<f32>> = blocks.iter().map(|x| x[b].clone()).collect();
        println!("  block {b} alone: {:.4}", accuracy(&one, &labels));
    }
}
