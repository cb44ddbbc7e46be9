//! Wall labels: the names of clusters set beside their group on the similarity map, each joined
//! to it by a thin leader line and placed where it covers the fewest marks (never over them when
//! there is room), larger clusters first, none over another label.

use crate::viewer::Viewer;

/// One label as the page places it (canvas pixels).
#[derive(Debug, Clone, PartialEq)]
pub struct WallLabel {
    /// The short name shown (the cluster's first two terms).
    pub text: String,
    /// The group's centre, where the leader line starts.
    pub anchor: [f64; 2],
    /// The label's box [x0, y0, x1, y1]; the leader line ends on its nearest edge.
    pub rect: [f64; 4],
    /// How many items the box covers (0 when it found free room).
    pub covers: usize,
}

/// How a label's size is estimated on the canvas: its width per character and its height, and
/// how far beside the group it may be set.
#[derive(Debug, Clone, Copy)]
pub struct LabelMetrics {
    pub char_px: f64,
    pub height_px: f64,
    /// Distances from the group's centre to try, nearest first.
    pub reach_px: [f64; 3],
}

/// Directions to try around a group, right and left first (labels read best beside).
const DIRECTIONS: [[f64; 2]; 8] = [
    [1.0, 0.0],
    [-1.0, 0.0],
    [0.7, -0.7],
    [-0.7, -0.7],
    [0.7, 0.7],
    [-0.7, 0.7],
    [0.0, -1.0],
    [0.0, 1.0],
];

/// The wall labels of the map shown: the largest clusters (at least `min_size` items, at most
/// `max`) whose centre is on screen.
pub fn wall_labels(v: &Viewer, m: LabelMetrics, max: usize, min_size: u64) -> Vec<WallLabel> {
    let Some(c) = &v.atlas.manifest.clusters else {
        return Vec::new();
    };
    let cam = &v.camera;
    let [w, h] = cam.size;
    let mut placed: Vec<WallLabel> = Vec::new();
    let mut near = Vec::new();
    for info in c.list.iter().filter(|i| i.size >= min_size).take(max) {
        let anchor = cam.to_screen(info.position);
        if anchor[0] < 0.0 || anchor[1] < 0.0 || anchor[0] > w || anchor[1] > h {
            continue;
        }
        let text: String = info
            .label
            .split(" · ")
            .take(2)
            .collect::<Vec<_>>()
            .join(" · ");
        let half_w = (text.chars().count() as f64 * m.char_px) / 2.0 + 4.0;
        let half_h = m.height_px / 2.0;
        let mut best: Option<([f64; 4], usize)> = None;
        'search: for reach in m.reach_px {
            for d in DIRECTIONS {
                // The box's nearest edge `reach` away from the anchor along `d`.
                let cx = anchor[0] + d[0] * (reach + half_w * d[0].abs());
                let cy = anchor[1] + d[1] * (reach + half_h * d[1].abs());
                let rect = [cx - half_w, cy - half_h, cx + half_w, cy + half_h];
                if rect[0] < 0.0 || rect[1] < 0.0 || rect[2] > w || rect[3] > h {
                    continue;
                }
                if placed.iter().any(|p| overlaps(p.rect, rect)) {
                    continue;
                }
                let covers = marks_in(v, rect, &mut near);
                if best.is_none_or(|(_, b)| covers < b) {
                    best = Some((rect, covers));
                }
                if covers == 0 {
                    break 'search;
                }
            }
        }
        if let Some((rect, covers)) = best {
            placed.push(WallLabel {
                text,
                anchor,
                rect,
                covers,
            });
        }
    }
    placed
}

fn overlaps(a: [f64; 4], b: [f64; 4]) -> bool {
    a[0] < b[2] && b[0] < a[2] && a[1] < b[3] && b[1] < a[3]
}

/// Items of the map shown whose place falls in the screen box `r`.
fn marks_in(v: &Viewer, r: [f64; 4], scratch: &mut Vec<u32>) -> usize {
    let (a, b) = (v.camera.to_map([r[0], r[1]]), v.camera.to_map([r[2], r[3]]));
    let q = [
        a[0].min(b[0]),
        a[1].min(b[1]),
        a[0].max(b[0]),
        a[1].max(b[1]),
    ];
    v.grid.query_any_order(q, scratch);
    scratch
        .iter()
        .filter(|&&i| {
            let p = v.atlas.positions[i as usize];
            let s = v.camera.to_screen(p);
            s[0] >= r[0] && s[0] <= r[2] && s[1] >= r[1] && s[1] <= r[3]
        })
        .count()
}

/// The leader line from the anchor to the nearest point of the label's box.
pub fn leader(l: &WallLabel) -> ([f64; 2], [f64; 2]) {
    let [x0, y0, x1, y1] = l.rect;
    let end = [l.anchor[0].clamp(x0, x1), l.anchor[1].clamp(y0, y1)];
    (l.anchor, end)
}
