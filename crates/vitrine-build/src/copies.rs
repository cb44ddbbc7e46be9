//! Copies of one picture: candidate pairs from the neighbour graph, confirmed by the pictures'
//! signatures (perceptual hashes over crops and a colour check, `vitrine_images::copies`), joined
//! into groups.
//!
//! A pair is a candidate when the two items are neighbours in the graph and much closer than the
//! item's neighbourhood: their distance at most `ratio` times the 75th percentile of the distances
//! of the item's own neighbours. Copies of one picture lie far closer together than different pictures do
//! in any feature space worth the name, so the hashes need only be compared for few pairs, and a
//! flat look-alike that hashes alike by chance is seldom asked about. Files with the same bytes
//! (the same SHA-256) are copies whatever the graph says. Groups are the connected parts of the
//! confirmed pairs (union-find): a copy of a copy is in the group.

use vitrine_images::copies::{compare, Signature};
use vitrine_map::knn::KnnGraph;

/// When a candidate pair is taken for a copy.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CopyRule {
    /// A pair's distance at most this share of the item's neighbourhood (the 75th percentile of
    /// its neighbours' distances) makes it a candidate.
    pub ratio: f32,
    /// The hash distance (bits of 64, least over crops) at most.
    pub max_bits: u32,
    /// The colour correlation over the matched region at least.
    pub min_colour: f32,
}

impl Default for CopyRule {
    /// The thresholds the copies test set's curves support (docs/copies.md).
    fn default() -> CopyRule {
        CopyRule {
            ratio: 0.5,
            max_bits: 8,
            min_colour: 0.6,
        }
    }
}

/// Neighbour pairs (i < j, item indices of the graph) much closer than i's or j's neighbourhood,
/// each once, with their distance. An item's neighbourhood is the 75th percentile of its
/// neighbours' distances: its copies are among its nearest neighbours and pull a median down
/// (a picture with eight copies among fifteen neighbours has a copy at its median), while the
/// far quarter of the list stays among other pictures for groups of up to three quarters of k.
pub fn candidates(graph: &KnnGraph, ratio: f32) -> Vec<(u32, u32, f32)> {
    let n = graph.ids.len() / graph.k.max(1);
    let reference: Vec<f32> = (0..n)
        .map(|i| {
            let mut d: Vec<f32> = graph.neighbours(i).map(|(_, d)| d).collect();
            if d.is_empty() {
                return 0.0;
            }
            let at = ((d.len() * 3) / 4).min(d.len() - 1);
            *d.select_nth_unstable_by(at, f32::total_cmp).1
        })
        .collect();
    let mut pairs = Vec::new();
    for i in 0..n {
        for (j, d) in graph.neighbours(i) {
            if j == i {
                continue;
            }
            let within = |m: f32| d <= ratio * m || d == 0.0;
            if within(reference[i]) || within(reference[j]) {
                let (a, b) = (i.min(j) as u32, i.max(j) as u32);
                pairs.push((a, b, d));
            }
        }
    }
    pairs.sort_by_key(|&(a, b, _)| (a, b));
    pairs.dedup_by_key(|&mut (a, b, _)| (a, b));
    pairs
}

/// One candidate pair as it was judged.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Checked {
    pub a: u32,
    pub b: u32,
    /// Their distance in the neighbour graph.
    pub distance: f32,
    /// Hash distance and colour correlation (None: a picture was missing).
    pub bits: Option<u32>,
    pub colour: Option<f32>,
    /// The two image files are the same bytes.
    pub same_file: bool,
    pub copy: bool,
}

/// Judges every candidate (`signatures`, `digests` and `usable` indexed as the candidates' items),
/// and adds the pairs of items whose files have the same digest. Only files that could be used
/// (decoded into a picture) count as the same bytes: every empty or broken file is not one
/// picture.
pub fn check(
    candidates: &[(u32, u32, f32)],
    signatures: &[Option<Signature>],
    digests: &[String],
    usable: &[bool],
    rule: &CopyRule,
) -> Vec<Checked> {
    let same = |a: u32, b: u32| {
        let (x, y) = (&digests[a as usize], &digests[b as usize]);
        usable[a as usize] && usable[b as usize] && !x.is_empty() && x == y
    };
    let mut checked: Vec<Checked> = candidates
        .iter()
        .map(|&(a, b, distance)| {
            let likeness = match (&signatures[a as usize], &signatures[b as usize]) {
                (Some(x), Some(y)) => Some(compare(x, y)),
                _ => None,
            };
            let same_file = same(a, b);
            let copy = same_file
                || likeness.is_some_and(|l| l.bits <= rule.max_bits && l.colour >= rule.min_colour);
            Checked {
                a,
                b,
                distance,
                bits: likeness.map(|l| l.bits),
                colour: likeness.map(|l| l.colour),
                same_file,
                copy,
            }
        })
        .collect();
    // Files of the same bytes, whether or not the graph paired them: each joined to the first.
    let mut by_digest: std::collections::HashMap<&str, u32> = Default::default();
    let listed: std::collections::HashSet<(u32, u32)> =
        checked.iter().map(|c| (c.a, c.b)).collect();
    for (i, d) in digests.iter().enumerate() {
        if d.is_empty() || !usable[i] {
            continue;
        }
        let first = *by_digest.entry(d.as_str()).or_insert(i as u32);
        if first != i as u32 && !listed.contains(&(first, i as u32)) {
            checked.push(Checked {
                a: first,
                b: i as u32,
                distance: f32::NAN,
                bits: None,
                colour: None,
                same_file: true,
                copy: true,
            });
        }
    }
    checked
}

/// The groups the confirmed pairs join (union-find): each group's members ascending, groups by
/// their first member.
pub fn groups(n: usize, checked: &[Checked]) -> Vec<Vec<u32>> {
    let mut sets = vitrine_map::disjoint::DisjointSets::new(n);
    for c in checked.iter().filter(|c| c.copy) {
        sets.union(c.a, c.b);
    }
    let mut members: std::collections::BTreeMap<u32, Vec<u32>> = Default::default();
    for c in checked.iter().filter(|c| c.copy) {
        for i in [c.a, c.b] {
            let r = sets.find(i);
            members.entry(r).or_default().push(i);
        }
    }
    let mut out: Vec<Vec<u32>> = members
        .into_values()
        .map(|mut m| {
            m.sort_unstable();
            m.dedup();
            m
        })
        .collect();
    out.sort_by_key(|g| g[0]);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn graph(k: usize, lists: &[&[(u32, f32)]]) -> KnnGraph {
        let mut ids = Vec::new();
        let mut distances = Vec::new();
        for l in lists {
            for s in 0..k {
                let (j, d) = l.get(s).copied().unwrap_or((u32::MAX, f32::INFINITY));
                ids.push(j);
                distances.push(d);
            }
        }
        KnnGraph { k, ids, distances }
    }

    #[test]
    fn candidates_are_pairs_much_closer_than_the_neighbourhood_each_once() {
        // Items 0 and 1 are a tenth as far apart as their other neighbours; 2 and 3 are ordinary.
        let g = graph(
            3,
            &[
                &[(1, 0.05), (2, 0.5), (3, 0.6)],
                &[(0, 0.05), (2, 0.55), (3, 0.5)],
                &[(3, 0.4), (0, 0.5), (1, 0.55)],
                &[(2, 0.4), (1, 0.5), (0, 0.6)],
            ],
        );
        assert_eq!(candidates(&g, 0.5), vec![(0, 1, 0.05)]);
        // A more generous ratio takes in 2-3 as well (0.4 <= 0.75 x 0.55, item 2's 75th
        // percentile), not yet 0-2 (0.5 > 0.75 x 0.6 and 0.75 x 0.55).
        let c: Vec<(u32, u32)> = candidates(&g, 0.75).iter().map(|c| (c.0, c.1)).collect();
        assert_eq!(c, vec![(0, 1), (2, 3)]);
    }

    #[test]
    fn a_picture_with_many_copies_among_its_neighbours_keeps_them_all_as_candidates() {
        // Item 0 has nine copies (items 1-9, at 0.02-0.06) among fifteen neighbours; the other
        // six lie at 0.5-0.6. Its median neighbour is a copy; its 75th percentile is not.
        let mut list: Vec<(u32, f32)> = (1..10).map(|j| (j, 0.02 + 0.005 * j as f32)).collect();
        list.extend((10..16).map(|j| (j, 0.5 + 0.02 * (j - 10) as f32)));
        let mut lists = vec![list];
        // The others' lists hold only far neighbours (so that only item 0's reference counts).
        lists.extend((1..16).map(|_| vec![(0u32, 0.9f32); 15]));
        let lists: Vec<&[(u32, f32)]> = lists.iter().map(|l| l.as_slice()).collect();
        let g = graph(15, &lists);
        let c: Vec<u32> = candidates(&g, 0.5)
            .iter()
            .filter(|c| c.0 == 0)
            .map(|c| c.1)
            .collect();
        assert_eq!(c, (1..10).collect::<Vec<u32>>());
    }

    #[test]
    fn groups_join_confirmed_pairs_through_copies_of_copies_and_same_files() {
        let digests: Vec<String> = ["a", "", "b", "c", "c", "", "d"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let sig = |seed: u64| {
            Some(Signature {
                hashes: [seed.wrapping_mul(0x9E37_79B9_7F4A_7C15); 11],
                grid: (0..768)
                    .map(|i| ((i * 7 + seed as usize * 31) % 251) as u8)
                    .collect(),
            })
        };
        // 0, 1 and 2 share a picture; 5 is another picture; 3 and 4 are the same file.
        let signatures = vec![sig(1), sig(1), sig(1), sig(2), sig(3), sig(4), None];
        let cands = vec![(0, 1, 0.1), (1, 2, 0.1), (2, 5, 0.1), (5, 6, 0.1)];
        let usable = vec![true; 7];
        let checked = check(&cands, &signatures, &digests, &usable, &CopyRule::default());
        let copy: Vec<(u32, u32)> = checked
            .iter()
            .filter(|c| c.copy)
            .map(|c| (c.a, c.b))
            .collect();
        assert_eq!(copy, vec![(0, 1), (1, 2), (3, 4)]);
        // No picture: judged as unknown, not a copy.
        assert_eq!(checked[3].bits, None);
        assert_eq!(groups(7, &checked), vec![vec![0, 1, 2], vec![3, 4]]);
        // Files that could not be used are not the same picture, whatever their bytes.
        let mut broken = usable.clone();
        broken[4] = false;
        let checked = check(&cands, &signatures, &digests, &broken, &CopyRule::default());
        assert_eq!(groups(7, &checked), vec![vec![0, 1, 2]]);
    }
}
