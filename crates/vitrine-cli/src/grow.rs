//! `vitrine corpus`: growing the corpus from examples (a round of marks, trained and scored on
//! the atlas's compressed vectors; the best candidates accepted) and replaying a corpus file's
//! rounds to the same scores.

use std::collections::{HashMap, HashSet};
use std::path::PathBuf;

use anyhow::{bail, Result};
use clap::Args;
use vitrine_build::read::Atlas;
use vitrine_corpus::grow::{self, Model, Round, Q8};

#[derive(Args, Default)]
pub struct GrowArgs {
    /// Grow the corpus from examples: items "like these", by id, comma-separated. Starts a round
    /// (kept in the corpus file) that trains a model on the atlas's compressed vectors.
    #[arg(long, value_delimiter = ',')]
    pub like: Vec<String>,
    /// Items "not these", by id, comma-separated (with --like).
    #[arg(long, value_delimiter = ',')]
    pub not: Vec<String>,
    /// The model's C: the inverse of its penalty's strength (larger fits the marks more closely).
    /// [default: the last round's, else 1]
    #[arg(long = "grow-c")]
    pub c: Option<f64>,
    /// Unmarked items drawn at random as "not these" besides the marked ones (at most 10,000).
    /// [default: the last round's, else 200]
    #[arg(long = "grow-background")]
    pub background: Option<usize>,
    /// The seed of the background draw. [default: the last round's, else 1]
    #[arg(long = "grow-seed")]
    pub seed: Option<u64>,
    /// Accept the N best candidates of the last round (unmarked items not yet in the corpus)
    /// into the corpus.
    #[arg(long = "accept-top", value_name = "N")]
    pub accept_top: Option<usize>,
    /// Write every item's score under the last round's model here (CSV: rank, id, score, mark),
    /// best first.
    #[arg(long)]
    pub scores: Option<PathBuf>,
}

impl GrowArgs {
    pub fn wanted(&self) -> bool {
        !self.like.is_empty() || self.accept_top.is_some() || self.scores.is_some()
    }

    /// The next round: every mark so far (the last round's, its rejected items as "not these",
    /// and these), with these settings or the last round's.
    pub fn next_round(&self, last: Option<&Round>) -> Result<Round> {
        let c = self.c.or(last.map(|r| r.c)).unwrap_or(1.0);
        let background = self
            .background
            .or(last.map(|r| r.background))
            .unwrap_or(200);
        if background > grow::MAX_BACKGROUND {
            bail!(
                "--grow-background {background}: at most {} items",
                grow::MAX_BACKGROUND
            );
        }
        let mut like: Vec<String> = last.map_or(vec![], |r| r.like.clone());
        let mut not: Vec<String> = last.map_or(vec![], |r| {
            r.not.iter().chain(&r.rejected).cloned().collect()
        });
        for id in &self.like {
            not.retain(|x| x != id);
            if !like.contains(id) {
                like.push(id.clone());
            }
        }
        for id in &self.not {
            if self.like.contains(id) {
                bail!("--like and --not both name {id}");
            }
            like.retain(|x| x != id);
            if !not.contains(id) {
                not.push(id.clone());
            }
        }
        Ok(Round {
            like,
            not,
            c,
            background,
            seed: self.seed.or(last.map(|r| r.seed)).unwrap_or(1),
            accepted: vec![],
            rejected: vec![],
        })
    }
}

/// The atlas's compressed vectors, read whole.
pub fn read_q8(atlas: &Atlas) -> Result<Q8> {
    let Some(v) = &atlas.manifest.vectors else {
        bail!(
            "{}: the atlas keeps no vectors for growing a corpus (build it with --browser-vectors, on by default since this version)",
            atlas.dir.display()
        );
    };
    let mut bytes = Vec::with_capacity(atlas.manifest.item_count as usize * v.dims as usize);
    for c in &v.chunks {
        bytes.extend(atlas.array::<u8>(c)?);
    }
    Ok(Q8 {
        dims: v.dims as usize,
        offset: v.offset.clone(),
        scale: v.scale.clone(),
        bytes,
    })
}

/// A round trained: its model, every item's score, and the marks by item.
pub struct Trained {
    pub model: Model,
    pub scores: Vec<f32>,
    pub mark: HashMap<usize, &'static str>,
}

/// Trains `r` on `q` (ids resolved by `index_of`; ids the atlas lacks are named).
pub fn train(q: &Q8, r: &Round, index_of: &dyn Fn(&str) -> Option<usize>) -> Result<Trained> {
    let resolve = |ids: &[String], what: &str| -> Result<Vec<usize>> {
        let missing: Vec<&str> = ids
            .iter()
            .filter(|i| index_of(i).is_none())
            .map(String::as_str)
            .take(5)
            .collect();
        if !missing.is_empty() {
            bail!("{what}: the atlas has no item {}", missing.join(", "));
        }
        Ok(ids.iter().filter_map(|i| index_of(i)).collect())
    };
    let like = resolve(&r.like, "like these")?;
    let not = resolve(&r.not, "not these")?;
    let mut mark: HashMap<usize, &'static str> = HashMap::new();
    for &i in &not {
        mark.insert(i, "not");
    }
    for &i in &like {
        mark.insert(i, "like");
    }
    let marked: HashSet<usize> = mark.keys().copied().collect();
    let bg = grow::background(q.items(), &marked, r.background, r.seed);
    for &i in &bg {
        mark.insert(i, "background");
    }
    let negatives: Vec<usize> = not.iter().chain(&bg).copied().collect();
    let model = grow::train(q, &like, &negatives, r.c).map_err(|e| anyhow::anyhow!("{e}"))?;
    let scores = grow::scores(q, &model);
    Ok(Trained {
        model,
        scores,
        mark,
    })
}

/// The scores file: every item, best first.
pub fn scores_csv(t: &Trained, id: &dyn Fn(usize) -> String) -> String {
    let order = grow::candidates(&t.scores, &|_| false, t.scores.len());
    let mut out = String::from("rank,id,score,mark\n");
    for (k, &i) in order.iter().enumerate() {
        let id = id(i);
        let cell = if id.contains([',', '"', '\n', '\r']) {
            format!("\"{}\"", id.replace('"', "\"\""))
        } else {
            id
        };
        out.push_str(&format!(
            "{},{cell},{},{}\n",
            k + 1,
            t.scores[i],
            t.mark.get(&i).copied().unwrap_or("")
        ));
    }
    out
}
