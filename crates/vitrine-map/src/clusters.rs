//! Clusters of the fuzzy neighbour graph by modularity optimisation with the Louvain method
//! (Blondel, Guillaume, Lambiotte and Lefebvre, 2008): local moving of single vertices to the
//! neighbouring community with the largest modularity gain, then aggregation of communities into
//! vertices, repeated until nothing moves. Deterministic: vertices are visited in index order.
//!
//! Each cluster gets a label from the catalogue values most over-represented in it: for each category
//! value, its share among the cluster's items divided by its share in the whole collection (the lift).

use crate::umap::FuzzyGraph;

/// Community of every vertex, numbered by decreasing size (ties by smallest member).
pub fn louvain(n: usize, graph: &FuzzyGraph, resolution: f64) -> Vec<u32> {
    // Adjacency of the current level (symmetric, weights as f64).
    let mut adj: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n];
    for ((&h, &t), &w) in graph.heads.iter().zip(&graph.tails).zip(&graph.weights) {
        if h != t {
            adj[h as usize].push((t, w as f64));
            adj[t as usize].push((h, w as f64));
        }
    }
    let mut membership: Vec<u32> = (0..n as u32).collect();
    let mut self_loops = vec![0f64; n];
    loop {
        let m = adj.len();
        let degree: Vec<f64> = (0..m)
            .map(|v| adj[v].iter().map(|e| e.1).sum::<f64>() + 2.0 * self_loops[v])
            .collect();
        let two_m: f64 = degree.iter().sum();
        if two_m <= 0.0 {
            break;
        }
        let mut comm: Vec<u32> = (0..m as u32).collect();
        let mut tot: Vec<f64> = degree.clone();
        let mut moved_any = false;
        let mut weights_to: Vec<f64> = vec![0.0; m];
        let mut touched: Vec<u32> = Vec::new();
        for _pass in 0..50 {
            let mut moved = 0usize;
            for v in 0..m {
                let cv = comm[v] as usize;
                for &(u, w) in &adj[v] {
                    let cu = comm[u as usize] as usize;
                    if weights_to[cu] == 0.0 {
                        touched.push(cu as u32);
                    }
                    weights_to[cu] += w;
                }
                tot[cv] -= degree[v];
                let gain = |c: usize, k_in: f64| k_in - resolution * tot[c] * degree[v] / two_m;
                let mut best = cv;
                let mut best_gain = gain(cv, weights_to[cv]);
                for &c in &touched {
                    let c = c as usize;
                    let g = gain(c, weights_to[c]);
                    if g > best_gain + 1e-12
                        || (g > best_gain - 1e-12 && c < best && g >= best_gain)
                    {
                        best = c;
                        best_gain = g;
                    }
                }
                tot[best] += degree[v];
                if best != cv {
                    comm[v] = best as u32;
                    moved += 1;
                    moved_any = true;
                }
                for &c in &touched {
                    weights_to[c as usize] = 0.0;
                }
                touched.clear();
            }
            if moved == 0 {
                break;
            }
        }
        if !moved_any {
            break;
        }
        // Renumber communities densely and aggregate.
        let mut id = vec![u32::MAX; m];
        let mut next = 0u32;
        for &c in &comm[..m] {
            let c = c as usize;
            if id[c] == u32::MAX {
                id[c] = next;
                next += 1;
            }
        }
        for x in membership.iter_mut() {
            *x = id[comm[*x as usize] as usize];
        }
        let k = next as usize;
        let mut agg: Vec<std::collections::BTreeMap<u32, f64>> = vec![Default::default(); k];
        let mut loops = vec![0f64; k];
        for v in 0..m {
            let cv = id[comm[v] as usize];
            loops[cv as usize] += self_loops[v];
            for &(u, w) in &adj[v] {
                let cu = id[comm[u as usize] as usize];
                if cu == cv {
                    loops[cv as usize] += w / 2.0;
                } else {
                    *agg[cv as usize].entry(cu).or_default() += w;
                }
            }
        }
        adj = agg.into_iter().map(|m| m.into_iter().collect()).collect();
        self_loops = loops;
        if k == m {
            break;
        }
    }
    // Number by size, largest first.
    let k = membership
        .iter()
        .map(|&c| c as usize + 1)
        .max()
        .unwrap_or(0);
    let mut size = vec![(0usize, u32::MAX); k];
    for (v, &c) in membership.iter().enumerate() {
        size[c as usize].0 += 1;
        size[c as usize].1 = size[c as usize].1.min(v as u32);
    }
    let mut order: Vec<usize> = (0..k).collect();
    order.sort_by(|&a, &b| size[b].0.cmp(&size[a].0).then(size[a].1.cmp(&size[b].1)));
    let mut rank = vec![0u32; k];
    for (r, &c) in order.iter().enumerate() {
        rank[c] = r as u32;
    }
    membership.iter().map(|&c| rank[c as usize]).collect()
}

/// One over-represented catalogue value in a cluster.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize, PartialEq)]
pub struct Term {
    pub field: String,
    pub value: String,
    /// Share of the cluster's items with this value.
    pub share: f64,
    /// That share divided by the value's share in the whole collection.
    pub lift: f64,
}

/// A category field as cluster labels read it: each item's values, `offsets` (items + 1) into
/// `codes` (indices into `values`; one per item for a field with one value per record).
pub struct LabelField {
    pub name: String,
    pub values: Vec<String>,
    pub offsets: Vec<u32>,
    pub codes: Vec<u32>,
}

impl LabelField {
    /// A field with one value per item (`u32::MAX` or any code past the values: none).
    pub fn single(name: String, codes: &[u32], values: Vec<String>) -> LabelField {
        let mut offsets = Vec::with_capacity(codes.len() + 1);
        let mut kept = Vec::with_capacity(codes.len());
        offsets.push(0);
        for &c in codes {
            if (c as usize) < values.len() {
                kept.push(c);
            }
            offsets.push(kept.len() as u32);
        }
        LabelField {
            name,
            values,
            offsets,
            codes: kept,
        }
    }
}

/// The most over-represented values per cluster (values held by at least a third of the cluster's items,
/// with lift at least 1.5), best first, at most `max` per cluster. An item with several values of
/// a field counts for each.
pub fn label_terms(clusters: &[u32], fields: &[LabelField], max: usize) -> Vec<Vec<Term>> {
    let k = clusters.iter().map(|&c| c as usize + 1).max().unwrap_or(0);
    let n = clusters.len() as f64;
    let mut size = vec![0usize; k];
    for &c in clusters {
        size[c as usize] += 1;
    }
    let mut out: Vec<Vec<Term>> = vec![Vec::new(); k];
    for LabelField {
        name,
        values,
        offsets,
        codes,
    } in fields
    {
        let mut total = vec![0usize; values.len()];
        let mut per = vec![std::collections::HashMap::<u32, usize>::new(); k];
        for (i, w) in offsets.windows(2).enumerate().take(clusters.len()) {
            for &code in &codes[w[0] as usize..w[1] as usize] {
                if (code as usize) < values.len() {
                    total[code as usize] += 1;
                    *per[clusters[i] as usize].entry(code).or_default() += 1;
                }
            }
        }
        for c in 0..k {
            for (&code, &count) in &per[c] {
                let share = count as f64 / size[c] as f64;
                let overall = total[code as usize] as f64 / n;
                let lift = share / overall;
                if share >= 1.0 / 3.0 && lift >= 1.5 {
                    out[c].push(Term {
                        field: name.clone(),
                        value: values[code as usize].clone(),
                        share,
                        lift,
                    });
                }
            }
        }
    }
    for terms in &mut out {
        terms.sort_by(|a, b| {
            (b.share * b.lift.ln())
                .total_cmp(&(a.share * a.lift.ln()))
                .then(a.value.cmp(&b.value))
        });
        terms.truncate(max);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ring_of_cliques(cliques: usize, size: usize) -> (usize, FuzzyGraph) {
        // The standard worked example for modularity: cliques joined in a ring by single edges.
        let mut g = FuzzyGraph {
            heads: vec![],
            tails: vec![],
            weights: vec![],
        };
        for c in 0..cliques {
            let base = c * size;
            for a in 0..size {
                for b in a + 1..size {
                    g.heads.push((base + a) as u32);
                    g.tails.push((base + b) as u32);
                    g.weights.push(1.0);
                }
            }
            g.heads.push((base + size - 1) as u32);
            g.tails.push((((c + 1) % cliques) * size) as u32);
            g.weights.push(1.0);
        }
        (cliques * size, g)
    }

    #[test]
    fn finds_the_cliques_of_a_ring() {
        let (n, g) = ring_of_cliques(8, 6);
        let m = louvain(n, &g, 1.0);
        for c in 0..8 {
            let ids: std::collections::HashSet<u32> = m[c * 6..c * 6 + 6].iter().copied().collect();
            assert_eq!(ids.len(), 1, "clique {c} is split: {m:?}");
        }
        let distinct: std::collections::HashSet<u32> = m.iter().copied().collect();
        assert_eq!(distinct.len(), 8);
        assert_eq!(louvain(n, &g, 1.0), m, "deterministic");
    }

    #[test]
    fn labels_name_what_is_over_represented() {
        let clusters = vec![0, 0, 0, 0, 1, 1, 1, 1];
        let codes = vec![0, 0, 0, 1, 1, 1, 1, 1];
        let fields = vec![LabelField::single(
            "technique".to_string(),
            &codes,
            vec!["etching".to_string(), "woodcut".to_string()],
        )];
        let t = label_terms(&clusters, &fields, 3);
        assert_eq!(t[0][0].value, "etching");
        assert!((t[0][0].share - 0.75).abs() < 1e-12 && (t[0][0].lift - 2.0).abs() < 1e-12);
        assert_eq!(t[1][0].value, "woodcut");
        // Several values per item: "night", held by 3 of cluster 1's 4 items (second in two of
        // them) and by none of cluster 0, labels cluster 1.
        let keywords = LabelField {
            name: "keywords".into(),
            values: vec!["ship".into(), "night".into()],
            offsets: vec![0, 1, 2, 3, 4, 6, 8, 9, 9],
            codes: vec![0, 0, 0, 0, 0, 1, 0, 1, 1],
        };
        let t = label_terms(&clusters, &[keywords], 3);
        let night = t[1]
            .iter()
            .find(|t| t.value == "night")
            .expect("night labels cluster 1");
        assert!((night.share - 0.75).abs() < 1e-12 && (night.lift - 2.0).abs() < 1e-12);
    }
}
