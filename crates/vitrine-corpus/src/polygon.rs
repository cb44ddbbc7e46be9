//! Lassos and rectangles in map coordinates.
//!
//! Fill rule: **even-odd**. A point is inside a lasso when a ray from it crosses the lasso's
//! outline an odd number of times. A lasso that crosses itself therefore leaves out the parts it
//! wraps twice (the centre of a five-pointed star drawn in one stroke is outside), which is what
//! one sees when the outline is drawn. Points exactly on the outline may fall either way.

use serde::{Deserialize, Serialize};

use crate::CorpusError;

/// A closed polygon in map coordinates: the last vertex joins the first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Polygon(pub Vec<[f64; 2]>);

impl Polygon {
    /// Reads "x1,y1 x2,y2 x3,y3 ..." (at least three vertices).
    pub fn parse(s: &str) -> Result<Polygon, CorpusError> {
        let mut pts = Vec::new();
        for (k, pair) in s.split_whitespace().enumerate() {
            let bad = || {
                CorpusError::Invalid(format!(
                    "lasso vertex {} ({pair:?}) is not \"x,y\" with two finite numbers",
                    k + 1
                ))
            };
            let (x, y) = pair.split_once(',').ok_or_else(bad)?;
            let x: f64 = x.trim().parse().map_err(|_| bad())?;
            let y: f64 = y.trim().parse().map_err(|_| bad())?;
            if !x.is_finite() || !y.is_finite() {
                return Err(bad());
            }
            pts.push([x, y]);
        }
        let p = Polygon(pts);
        p.check()?;
        Ok(p)
    }

    /// At least three vertices, all finite.
    pub fn check(&self) -> Result<(), CorpusError> {
        if self.0.len() < 3 {
            return Err(CorpusError::Invalid(format!(
                "a lasso needs at least 3 vertices, this one has {}",
                self.0.len()
            )));
        }
        if self.0.iter().flatten().any(|v| !v.is_finite()) {
            return Err(CorpusError::Invalid(
                "a lasso vertex is not a finite number".into(),
            ));
        }
        Ok(())
    }

    /// The rectangle [x0, y0, x1, y1] as a polygon.
    pub fn rect(r: [f64; 4]) -> Polygon {
        let (x0, x1) = (r[0].min(r[2]), r[0].max(r[2]));
        let (y0, y1) = (r[1].min(r[3]), r[1].max(r[3]));
        Polygon(vec![[x0, y0], [x1, y0], [x1, y1], [x0, y1]])
    }

    /// [min_x, min_y, max_x, max_y].
    pub fn bbox(&self) -> [f64; 4] {
        let mut b = [
            f64::INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NEG_INFINITY,
        ];
        for p in &self.0 {
            b[0] = b[0].min(p[0]);
            b[1] = b[1].min(p[1]);
            b[2] = b[2].max(p[0]);
            b[3] = b[3].max(p[1]);
        }
        b
    }

    /// Whether `p` is inside, by the even-odd rule (crossings of a ray towards +x).
    pub fn contains(&self, p: [f64; 2]) -> bool {
        let v = &self.0;
        let mut inside = false;
        let mut j = v.len() - 1;
        for i in 0..v.len() {
            let (a, b) = (v[i], v[j]);
            // Edges that straddle the ray's line (half-open in y, so a vertex counts once).
            if (a[1] > p[1]) != (b[1] > p[1]) {
                let x = a[0] + (p[1] - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
                if p[0] < x {
                    inside = !inside;
                }
            }
            j = i;
        }
        inside
    }

    /// Where the square (or rectangle) `r` = [x0, y0, x1, y1] lies: `Some(true)` wholly inside,
    /// `Some(false)` wholly outside, `None` when an edge of the outline meets it (its points must
    /// then be tested one by one). No edge meeting the closed rectangle, every point of it is on
    /// the same side of the outline as its centre, by the even-odd rule of [`Polygon::contains`].
    pub fn rect_status(&self, r: [f64; 4]) -> Option<bool> {
        let b = self.bbox();
        if r[0] > b[2] || r[2] < b[0] || r[1] > b[3] || r[3] < b[1] {
            return Some(false);
        }
        let v = &self.0;
        let mut j = v.len() - 1;
        for i in 0..v.len() {
            if segment_meets_rect(v[j], v[i], r) {
                return None;
            }
            j = i;
        }
        Some(self.contains([(r[0] + r[2]) / 2.0, (r[1] + r[3]) / 2.0]))
    }

    /// The outline as "x1,y1 x2,y2 ..." (what [`Polygon::parse`] reads).
    pub fn to_text(&self) -> String {
        self.0
            .iter()
            .map(|p| format!("{},{}", p[0], p[1]))
            .collect::<Vec<_>>()
            .join(" ")
    }
}

/// Whether the segment from `a` to `b` meets the closed rectangle `r` (clipped to it by the
/// slab method).
fn segment_meets_rect(a: [f64; 2], b: [f64; 2], r: [f64; 4]) -> bool {
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for d in 0..2 {
        let (lo, hi) = (r[d], r[d + 2]);
        let delta = b[d] - a[d];
        if delta == 0.0 {
            if a[d] < lo || a[d] > hi {
                return false;
            }
            continue;
        }
        let (mut u, mut w) = ((lo - a[d]) / delta, (hi - a[d]) / delta);
        if u > w {
            std::mem::swap(&mut u, &mut w);
        }
        t0 = t0.max(u);
        t1 = t1.min(w);
        if t0 > t1 {
            return false;
        }
    }
    true
}

/// A polygon made ready for many point tests: its edges sorted into horizontal bands, so that a
/// point meets only the edges of its band (a freehand lasso has hundreds of edges, a band a few).
/// It answers exactly as [`Polygon::contains`]: the same edges straddle the point's line, tested
/// with the same arithmetic, in the same order.
pub struct Prepared<'a> {
    poly: &'a Polygon,
    bbox: [f64; 4],
    y0: f64,
    band_h: f64,
    /// Per band, the indices i of the edges (vertex i to vertex i - 1) that reach into it.
    bands: Vec<Vec<u32>>,
}

impl<'a> Prepared<'a> {
    pub fn new(poly: &'a Polygon) -> Prepared<'a> {
        let bbox = poly.bbox();
        let v = &poly.0;
        let nb = (v.len() / 2).clamp(1, 1024);
        let band_h = ((bbox[3] - bbox[1]) / nb as f64).max(f64::MIN_POSITIVE);
        let mut bands = vec![Vec::new(); nb];
        let band = |y: f64| (((y - bbox[1]) / band_h) as usize).min(nb - 1);
        for i in 0..v.len() {
            let j = if i == 0 { v.len() - 1 } else { i - 1 };
            let (lo, hi) = (v[i][1].min(v[j][1]), v[i][1].max(v[j][1]));
            for b in &mut bands[band(lo)..=band(hi)] {
                b.push(i as u32);
            }
        }
        Prepared {
            poly,
            bbox,
            y0: bbox[1],
            band_h,
            bands,
        }
    }

    pub fn contains(&self, p: [f64; 2]) -> bool {
        let b = self.bbox;
        if !(p[0] >= b[0] && p[0] <= b[2] && p[1] >= b[1] && p[1] <= b[3]) {
            return false;
        }
        let v = &self.poly.0;
        let k = (((p[1] - self.y0) / self.band_h) as usize).min(self.bands.len() - 1);
        let mut inside = false;
        for &i in &self.bands[k] {
            let i = i as usize;
            let j = if i == 0 { v.len() - 1 } else { i - 1 };
            let (a, b) = (v[i], v[j]);
            if (a[1] > p[1]) != (b[1] > p[1]) {
                let x = a[0] + (p[1] - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
                if p[0] < x {
                    inside = !inside;
                }
            }
        }
        inside
    }
}

/// The items (from `candidates`, in their order, or every item in item order) whose position is
/// inside the polygon. The bounding box is tested first: most items of a large map fail it at once.
pub fn items_inside(
    positions: &[[f32; 2]],
    poly: &Polygon,
    candidates: Option<&[u32]>,
) -> Vec<usize> {
    let prepared = Prepared::new(poly);
    let test = |i: usize| {
        let p = positions[i];
        prepared.contains([p[0] as f64, p[1] as f64])
    };
    match candidates {
        Some(c) => c.iter().map(|&i| i as usize).filter(|&i| test(i)).collect(),
        None => (0..positions.len()).filter(|&i| test(i)).collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_rectangle_is_inside_outside_or_met_by_the_outline() {
        // Worked example: the square 0..10 with a notch cut from its top edge down to y = 4
        // between x = 4 and x = 6.
        let p = Polygon(vec![
            [0.0, 0.0],
            [10.0, 0.0],
            [10.0, 10.0],
            [6.0, 10.0],
            [6.0, 4.0],
            [4.0, 4.0],
            [4.0, 10.0],
            [0.0, 10.0],
        ]);
        assert_eq!(p.rect_status([1.0, 1.0, 3.0, 3.0]), Some(true));
        assert_eq!(p.rect_status([7.0, 5.0, 9.0, 9.0]), Some(true));
        // In the notch, and beyond the outline.
        assert_eq!(p.rect_status([4.5, 5.0, 5.5, 9.0]), Some(false));
        assert_eq!(p.rect_status([11.0, 0.0, 12.0, 1.0]), Some(false));
        // Across the notch's floor, across an outer edge, and around the whole outline.
        assert_eq!(p.rect_status([4.5, 3.0, 5.5, 5.0]), None);
        assert_eq!(p.rect_status([9.0, 9.0, 11.0, 11.0]), None);
        assert_eq!(p.rect_status([-1.0, -1.0, 11.0, 11.0]), None);
        // Touching an edge counts as meeting it.
        assert_eq!(p.rect_status([6.0, 5.0, 7.0, 6.0]), None);
        // Every answer agrees with the points of the rectangle, tested one by one.
        let mut s = 7u64;
        for _ in 0..2000 {
            let mut r = || {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                (s >> 11) as f64 / (1u64 << 53) as f64 * 14.0 - 2.0
            };
            let (x, y, w) = (r(), r(), r().abs() / 4.0);
            let rect = [x, y, x + w, y + w];
            if let Some(inside) = p.rect_status(rect) {
                for k in 0..25 {
                    let q = [x + w * (k % 5) as f64 / 4.0, y + w * (k / 5) as f64 / 4.0];
                    assert_eq!(p.contains(q), inside, "{rect:?} {q:?}");
                }
            }
        }
    }

    #[test]
    fn a_star_drawn_in_one_stroke_leaves_its_centre_out() {
        // Five points on a circle joined every second one: the pentagram. Worked example: its
        // centre is wrapped twice (winding number 2), so even-odd puts it outside; the tips are in.
        let pts: Vec<[f64; 2]> = (0..5)
            .map(|k| {
                let a =
                    std::f64::consts::FRAC_PI_2 + (2 * k) as f64 * 2.0 * std::f64::consts::PI / 5.0;
                [a.cos(), a.sin()]
            })
            .collect();
        let star = Polygon(pts);
        assert!(!star.contains([0.0, 0.0]));
        assert!(star.contains([0.0, 0.8]));
        assert!(!star.contains([2.0, 0.0]));
    }

    #[test]
    fn a_bow_tie_holds_both_wings_and_not_beyond() {
        let tie = Polygon::parse("0,0 2,2 2,0 0,2").unwrap();
        assert!(tie.contains([0.3, 1.0]) && tie.contains([1.7, 1.0]));
        assert!(!tie.contains([1.0, 0.2]) && !tie.contains([1.0, 1.8]));
    }

    #[test]
    fn prepared_lassos_answer_as_the_plain_test() {
        // Seeded random walks of 3 to 400 vertices (they cross themselves) over random points,
        // and points on the vertices' own heights (where the half-open rule matters).
        let mut s = 0x9E37_79B9_7F4A_7C15u64;
        let mut r = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        for n in [3usize, 4, 7, 40, 400] {
            let poly = Polygon((0..n).map(|_| [r() * 2.0 - 1.0, r() * 2.0 - 1.0]).collect());
            let prepared = Prepared::new(&poly);
            let mut pts: Vec<[f64; 2]> = (0..3000)
                .map(|_| [r() * 2.4 - 1.2, r() * 2.4 - 1.2])
                .collect();
            pts.extend(poly.0.iter().map(|v| [r() * 2.0 - 1.0, v[1]]));
            let mut inside = 0;
            for p in pts {
                assert_eq!(
                    prepared.contains(p),
                    poly.contains(p),
                    "{n} vertices, {p:?}"
                );
                inside += usize::from(poly.contains(p));
            }
            assert!(inside > 0);
        }
    }

    #[test]
    fn bad_lassos_are_refused_with_the_vertex_named() {
        let e = Polygon::parse("0,0 1,1").unwrap_err().to_string();
        assert!(e.contains("at least 3"), "{e}");
        let e = Polygon::parse("0,0 1,x 2,2").unwrap_err().to_string();
        assert!(e.contains("vertex 2") && e.contains("1,x"), "{e}");
        let e = Polygon::parse("0,0 1,1 inf,2").unwrap_err().to_string();
        assert!(e.contains("vertex 3"), "{e}");
        let p = Polygon::parse("0,0 3.5,0 3.5,-2").unwrap();
        assert_eq!(Polygon::parse(&p.to_text()).unwrap(), p);
    }
}
