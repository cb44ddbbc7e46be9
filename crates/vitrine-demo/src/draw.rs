//! Procedural pictures for the invented archive: fourteen visual families, each with its own
//! motifs and palettes, varied per sheet by a seeded generator.

use image::{Rgb, RgbImage};
use vitrine_map::rng::Rng;

pub const FAMILIES: [&str; 14] = [
    "standing figure",
    "rosette",
    "border band",
    "hill landscape",
    "seascape",
    "tree study",
    "arcade facade",
    "portrait bust",
    "woven check",
    "marbled paper",
    "star chart",
    "shield device",
    "vessel",
    "script flourish",
];

type C = [f32; 3];

fn mix(a: C, b: C, t: f32) -> C {
    [
        a[0] + (b[0] - a[0]) * t,
        a[1] + (b[1] - a[1]) * t,
        a[2] + (b[2] - a[2]) * t,
    ]
}

fn jitter(rng: &mut Rng, c: C, amount: f32) -> C {
    let mut o = c;
    for v in &mut o {
        *v = (*v + (rng.uniform() as f32 - 0.5) * amount).clamp(0.0, 255.0);
    }
    o
}

pub struct Canvas {
    pub w: u32,
    pub h: u32,
    px: Vec<C>,
}

impl Canvas {
    pub fn new(w: u32, h: u32, bg: C) -> Canvas {
        Canvas {
            w,
            h,
            px: vec![bg; (w * h) as usize],
        }
    }
    fn blend(&mut self, x: i32, y: i32, c: C, a: f32) {
        if x < 0 || y < 0 || x >= self.w as i32 || y >= self.h as i32 || a <= 0.0 {
            return;
        }
        let p = &mut self.px[(y as u32 * self.w + x as u32) as usize];
        *p = mix(*p, c, a.min(1.0));
    }
    /// Fills the pixels where `inside(x, y)` (in pixel units) holds, within a bounding box.
    fn fill(&mut self, bbox: [f32; 4], c: C, alpha: f32, inside: impl Fn(f32, f32) -> bool) {
        let x0 = bbox[0].floor().max(0.0) as i32;
        let y0 = bbox[1].floor().max(0.0) as i32;
        let x1 = bbox[2].ceil().min(self.w as f32) as i32;
        let y1 = bbox[3].ceil().min(self.h as f32) as i32;
        for y in y0..y1 {
            for x in x0..x1 {
                if inside(x as f32 + 0.5, y as f32 + 0.5) {
                    self.blend(x, y, c, alpha);
                }
            }
        }
    }
    pub fn ellipse(&mut self, cx: f32, cy: f32, rx: f32, ry: f32, c: C, alpha: f32) {
        self.fill([cx - rx, cy - ry, cx + rx, cy + ry], c, alpha, |x, y| {
            let (dx, dy) = ((x - cx) / rx, (y - cy) / ry);
            dx * dx + dy * dy <= 1.0
        });
    }
    pub fn rect(&mut self, x0: f32, y0: f32, x1: f32, y1: f32, c: C, alpha: f32) {
        self.fill([x0, y0, x1, y1], c, alpha, |_, _| true);
    }
    pub fn line(&mut self, a: (f32, f32), b: (f32, f32), width: f32, c: C, alpha: f32) {
        let r = width / 2.0;
        let bbox = [
            a.0.min(b.0) - r,
            a.1.min(b.1) - r,
            a.0.max(b.0) + r,
            a.1.max(b.1) + r,
        ];
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let len2 = (dx * dx + dy * dy).max(1e-6);
        self.fill(bbox, c, alpha, |x, y| {
            let t = (((x - a.0) * dx + (y - a.1) * dy) / len2).clamp(0.0, 1.0);
            let (px, py) = (a.0 + t * dx - x, a.1 + t * dy - y);
            px * px + py * py <= r * r
        });
    }
    /// A filled polygon (even-odd rule).
    pub fn polygon(&mut self, pts: &[(f32, f32)], c: C, alpha: f32) {
        let (mut bx0, mut by0, mut bx1, mut by1) = (f32::MAX, f32::MAX, f32::MIN, f32::MIN);
        for p in pts {
            bx0 = bx0.min(p.0);
            by0 = by0.min(p.1);
            bx1 = bx1.max(p.0);
            by1 = by1.max(p.1);
        }
        self.fill([bx0, by0, bx1, by1], c, alpha, |x, y| {
            let mut inside = false;
            let mut j = pts.len() - 1;
            for i in 0..pts.len() {
                let (pi, pj) = (pts[i], pts[j]);
                if (pi.1 > y) != (pj.1 > y) && x < (pj.0 - pi.0) * (y - pi.1) / (pj.1 - pi.1) + pi.0
                {
                    inside = !inside;
                }
                j = i;
            }
            inside
        });
    }
    pub fn grain(&mut self, rng: &mut Rng, amount: f32) {
        for p in &mut self.px {
            let n = (rng.uniform() as f32 - 0.5) * amount;
            for v in p.iter_mut() {
                *v = (*v + n).clamp(0.0, 255.0);
            }
        }
    }
    pub fn vignette(&mut self, strength: f32) {
        let (w, h) = (self.w as f32, self.h as f32);
        for y in 0..self.h {
            for x in 0..self.w {
                let dx = (x as f32 / w - 0.5) * 2.0;
                let dy = (y as f32 / h - 0.5) * 2.0;
                let f = 1.0 - strength * (dx * dx + dy * dy).min(2.0) / 2.0;
                let p = &mut self.px[(y * self.w + x) as usize];
                for v in p.iter_mut() {
                    *v *= f;
                }
            }
        }
    }
    pub fn into_image(self) -> RgbImage {
        let mut img = RgbImage::new(self.w, self.h);
        for (o, p) in img.pixels_mut().zip(&self.px) {
            *o = Rgb([p[0].round() as u8, p[1].round() as u8, p[2].round() as u8]);
        }
        img
    }
}

/// Paper and ink pairs; each family draws from a few of them.
const PAPERS: [C; 5] = [
    [240.0, 232.0, 214.0],
    [226.0, 214.0, 190.0],
    [246.0, 244.0, 238.0],
    [210.0, 222.0, 228.0],
    [58.0, 52.0, 64.0],
];
const INKS: [C; 6] = [
    [52.0, 40.0, 34.0],
    [150.0, 62.0, 42.0],
    [38.0, 62.0, 120.0],
    [30.0, 30.0, 30.0],
    [96.0, 110.0, 58.0],
    [222.0, 190.0, 96.0],
];

/// Draws one picture of `family` (an index into [`FAMILIES`]).
pub fn picture(family: usize, rng: &mut Rng) -> RgbImage {
    let r = |rng: &mut Rng, a: f32, b: f32| a + (b - a) * rng.uniform() as f32;
    // Orientation and size vary the way scans do.
    let portrait = matches!(family, 0 | 5 | 7 | 11 | 12);
    let (w, h) = if portrait {
        (r(rng, 200.0, 250.0) as u32, 320)
    } else if matches!(family, 2) {
        (320, r(rng, 110.0, 150.0) as u32)
    } else if matches!(family, 1 | 8 | 9 | 10) {
        let s = r(rng, 260.0, 320.0) as u32;
        (s, s)
    } else {
        (320, r(rng, 200.0, 250.0) as u32)
    };
    let (wf, hf) = (w as f32, h as f32);
    let paper = pal(rng, &PAPERS, &[0, 1, 2], 10.0);
    let ink = pal(rng, &INKS, &[0, 1, 2, 3], 20.0);
    let mut cv;
    match family {
        0 => {
            // A standing figure, one arm raised at a varying angle.
            cv = Canvas::new(w, h, paper);
            let cx = wf * r(rng, 0.4, 0.6);
            let s = hf / 320.0;
            cv.ellipse(cx, 60.0 * s, 18.0 * s, 22.0 * s, ink, 0.95);
            cv.line((cx, 82.0 * s), (cx, 190.0 * s), 22.0 * s, ink, 0.9);
            cv.line(
                (cx, 190.0 * s),
                (cx - r(rng, 10.0, 35.0) * s, 300.0 * s),
                9.0 * s,
                ink,
                0.9,
            );
            cv.line(
                (cx, 190.0 * s),
                (cx + r(rng, 10.0, 35.0) * s, 300.0 * s),
                9.0 * s,
                ink,
                0.9,
            );
            let ang = r(rng, -2.6, -1.6);
            cv.line(
                (cx, 100.0 * s),
                (cx + 80.0 * s * ang.cos(), 100.0 * s + 80.0 * s * ang.sin()),
                7.0 * s,
                ink,
                0.9,
            );
            cv.line(
                (cx, 100.0 * s),
                (cx + r(rng, 20.0, 50.0) * s, 170.0 * s),
                7.0 * s,
                ink,
                0.9,
            );
            cv.rect(0.0, 300.0 * s, wf, hf, mix(paper, ink, 0.25), 1.0);
        }
        1 => {
            // A rosette: rings of petals.
            cv = Canvas::new(w, h, paper);
            let (cx, cy) = (wf / 2.0, hf / 2.0);
            let petals = 6 + rng.below(7) as usize;
            let accent = pal(rng, &INKS, &[1, 5, 4], 30.0);
            for ring in 0..3 {
                let rad = (0.38 - ring as f32 * 0.11) * wf;
                for p in 0..petals {
                    let a = p as f32 / petals as f32 * std::f32::consts::TAU + ring as f32 * 0.3;
                    let col = if ring % 2 == 0 { ink } else { accent };
                    cv.ellipse(
                        cx + rad * 0.6 * a.cos(),
                        cy + rad * 0.6 * a.sin(),
                        rad * 0.32,
                        rad * 0.32,
                        col,
                        0.8,
                    );
                }
            }
            cv.ellipse(cx, cy, wf * 0.06, wf * 0.06, accent, 1.0);
        }
        2 => {
            // A border band: a repeating stepped motif between rules.
            cv = Canvas::new(w, h, paper);
            let unit = r(rng, 28.0, 48.0);
            cv.rect(0.0, 8.0, wf, 14.0, ink, 1.0);
            cv.rect(0.0, hf - 14.0, wf, hf - 8.0, ink, 1.0);
            let mut x = 0.0;
            while x < wf {
                cv.line((x, hf * 0.75), (x, hf * 0.3), 6.0, ink, 1.0);
                cv.line((x, hf * 0.3), (x + unit * 0.7, hf * 0.3), 6.0, ink, 1.0);
                cv.line(
                    (x + unit * 0.7, hf * 0.3),
                    (x + unit * 0.7, hf * 0.6),
                    6.0,
                    ink,
                    1.0,
                );
                cv.line(
                    (x + unit * 0.7, hf * 0.6),
                    (x + unit * 0.4, hf * 0.6),
                    6.0,
                    ink,
                    1.0,
                );
                x += unit;
            }
        }
        3 => {
            // Rolling hills under a graded sky.
            let sky = jitter(rng, [150.0, 180.0, 205.0], 40.0);
            cv = Canvas::new(w, h, sky);
            for y in 0..h {
                let t = y as f32 / hf;
                cv.rect(
                    0.0,
                    y as f32,
                    wf,
                    y as f32 + 1.0,
                    mix(sky, [245.0, 230.0, 200.0], t),
                    1.0,
                );
            }
            let greens = [
                [90.0, 120.0, 60.0],
                [70.0, 100.0, 50.0],
                [120.0, 130.0, 70.0],
            ];
            for (layer, g) in greens.iter().enumerate() {
                let base = hf * (0.5 + layer as f32 * 0.15);
                let phase = r(rng, 0.0, 6.0);
                let amp = r(rng, 10.0, 30.0);
                let mut pts = vec![(0.0, hf)];
                for i in 0..=32 {
                    let x = wf * i as f32 / 32.0;
                    pts.push((x, base + amp * (x / wf * 6.0 + phase).sin()));
                }
                pts.push((wf, hf));
                cv.polygon(&pts, jitter(rng, *g, 20.0), 1.0);
            }
        }
        4 => {
            // A seascape: horizon, wave strokes, maybe a sail.
            let sea = jitter(rng, [60.0, 100.0, 130.0], 30.0);
            cv = Canvas::new(w, h, jitter(rng, [200.0, 210.0, 215.0], 20.0));
            let horizon = hf * r(rng, 0.35, 0.5);
            cv.rect(0.0, horizon, wf, hf, sea, 1.0);
            for _ in 0..40 {
                let y = r(rng, horizon + 5.0, hf);
                let x = r(rng, 0.0, wf);
                let l = r(rng, 10.0, 40.0);
                cv.line((x, y), (x + l, y - 3.0), 2.5, [230.0, 235.0, 240.0], 0.7);
            }
            if rng.uniform() < 0.7 {
                let x = r(rng, 60.0, 260.0);
                cv.polygon(
                    &[(x, horizon - 60.0), (x, horizon), (x + 40.0, horizon)],
                    [245.0, 240.0, 230.0],
                    1.0,
                );
                cv.rect(
                    x - 20.0,
                    horizon,
                    x + 45.0,
                    horizon + 8.0,
                    [60.0, 40.0, 30.0],
                    1.0,
                );
            }
        }
        5 => {
            // A tree study: trunk and branching crown of leaf dabs.
            cv = Canvas::new(w, h, paper);
            let green = jitter(rng, [70.0, 110.0, 60.0], 40.0);
            let cx = wf / 2.0;
            cv.line((cx, hf), (cx, hf * 0.45), 16.0, ink, 1.0);
            for _ in 0..120 {
                let a = r(rng, 0.0, std::f32::consts::TAU);
                let d = r(rng, 0.0, wf * 0.42);
                cv.ellipse(
                    cx + d * a.cos(),
                    hf * 0.35 + d * 0.8 * a.sin(),
                    9.0,
                    6.0,
                    green,
                    0.6,
                );
            }
        }
        6 => {
            // An arcade facade: rows of round-headed openings.
            let stone = jitter(rng, [200.0, 180.0, 150.0], 30.0);
            cv = Canvas::new(w, h, stone);
            let cols = 3 + rng.below(4) as usize;
            let rows = 2 + rng.below(2) as usize;
            let (cw, rh) = (wf / cols as f32, hf / rows as f32);
            let dark = mix(ink, [20.0, 20.0, 25.0], 0.5);
            for rr in 0..rows {
                for c in 0..cols {
                    let x0 = c as f32 * cw + cw * 0.2;
                    let x1 = (c + 1) as f32 * cw - cw * 0.2;
                    let top = rr as f32 * rh + rh * 0.35;
                    cv.rect(x0, top, x1, (rr + 1) as f32 * rh - rh * 0.08, dark, 1.0);
                    cv.ellipse(
                        (x0 + x1) / 2.0,
                        top,
                        (x1 - x0) / 2.0,
                        (x1 - x0) / 2.0,
                        dark,
                        1.0,
                    );
                }
            }
        }
        7 => {
            // A portrait bust: head and shoulders on a dark ground.
            let ground = jitter(rng, [60.0, 50.0, 45.0], 30.0);
            cv = Canvas::new(w, h, ground);
            let skin = jitter(rng, [215.0, 180.0, 150.0], 30.0);
            let cloth = pal(rng, &INKS, &[1, 2, 4], 40.0);
            let cx = wf / 2.0 + r(rng, -15.0, 15.0);
            cv.ellipse(cx, hf * 0.95, wf * 0.48, hf * 0.3, cloth, 1.0);
            cv.ellipse(cx, hf * 0.4, wf * 0.2, hf * 0.17, skin, 1.0);
            cv.vignette(0.5);
        }
        8 => {
            // A woven check: crossing bands of two colours.
            let a = pal(rng, &INKS, &[1, 2, 4, 5], 50.0);
            let b = pal(rng, &INKS, &[0, 3, 2], 50.0);
            cv = Canvas::new(w, h, paper);
            let step = r(rng, 20.0, 44.0);
            let band = step * r(rng, 0.3, 0.6);
            let mut t = 0.0;
            while t < wf.max(hf) {
                cv.rect(t, 0.0, t + band, hf, a, 0.6);
                cv.rect(0.0, t, wf, t + band, b, 0.6);
                t += step;
            }
        }
        9 => {
            // Marbled paper: warped bands of colour.
            let a = jitter(rng, [180.0, 80.0, 70.0], 60.0);
            let b = jitter(rng, [60.0, 90.0, 150.0], 60.0);
            let c = jitter(rng, [230.0, 215.0, 170.0], 30.0);
            cv = Canvas::new(w, h, c);
            let (f1, f2, ph) = (r(rng, 0.02, 0.05), r(rng, 0.03, 0.08), r(rng, 0.0, 6.0));
            for y in 0..h {
                for x in 0..w {
                    let (xf, yf) = (x as f32, y as f32);
                    let v = (xf * f1 + 3.0 * (yf * f2 + ph).sin()).sin();
                    let col = if v > 0.3 {
                        a
                    } else if v < -0.3 {
                        b
                    } else {
                        c
                    };
                    cv.blend(x as i32, y as i32, col, 0.9);
                }
            }
        }
        10 => {
            // A star chart: bright points and guide circles on a dark ground.
            let night = jitter(rng, PAPERS[4], 20.0);
            cv = Canvas::new(w, h, night);
            let gold = jitter(rng, INKS[5], 30.0);
            let (cx, cy) = (wf / 2.0, hf / 2.0);
            for k in 1..4 {
                let rad = wf * 0.15 * k as f32;
                for s in 0..180 {
                    let a = s as f32 / 180.0 * std::f32::consts::TAU;
                    cv.blend(
                        (cx + rad * a.cos()) as i32,
                        (cy + rad * a.sin()) as i32,
                        gold,
                        0.6,
                    );
                }
            }
            for _ in 0..60 {
                let s = r(rng, 1.0, 4.0);
                cv.ellipse(
                    r(rng, 0.0, wf),
                    r(rng, 0.0, hf),
                    s,
                    s,
                    [250.0, 245.0, 220.0],
                    1.0,
                );
            }
        }
        11 => {
            // A shield device: divided field with a charge.
            cv = Canvas::new(w, h, paper);
            let a = pal(rng, &INKS, &[1, 2, 4], 30.0);
            let b = jitter(rng, INKS[5], 30.0);
            let (x0, x1, y0) = (wf * 0.15, wf * 0.85, hf * 0.15);
            let shield = [
                (x0, y0),
                (x1, y0),
                (x1, hf * 0.55),
                (wf * 0.5, hf * 0.88),
                (x0, hf * 0.55),
            ];
            cv.polygon(&shield, a, 1.0);
            match rng.below(3) {
                0 => cv.polygon(
                    &[
                        (wf * 0.5, y0),
                        (x1, y0),
                        (x1, hf * 0.55),
                        (wf * 0.5, hf * 0.88),
                    ],
                    b,
                    1.0,
                ),
                1 => cv.rect(x0, hf * 0.35, x1, hf * 0.45, b, 1.0),
                _ => cv.ellipse(wf * 0.5, hf * 0.45, wf * 0.12, wf * 0.12, b, 1.0),
            }
        }
        12 => {
            // A vessel: a turned profile (symmetric silhouette).
            cv = Canvas::new(w, h, paper);
            let body = pal(rng, &INKS, &[0, 1, 2, 4], 40.0);
            let (belly, neck) = (r(rng, 0.3, 0.45), r(rng, 0.08, 0.16));
            let cx = wf / 2.0;
            let mut left = Vec::new();
            for i in 0..=40 {
                let t = i as f32 / 40.0;
                let y = hf * (0.1 + 0.8 * t);
                let prof =
                    neck + (belly - neck) * (std::f32::consts::PI * t.powf(0.8)).sin().max(0.0);
                left.push((cx - prof * wf, y));
            }
            let mut pts = left.clone();
            pts.extend(left.iter().rev().map(|&(x, y)| (2.0 * cx - x, y)));
            cv.polygon(&pts, body, 1.0);
        }
        _ => {
            // A script flourish: long looping pen strokes.
            cv = Canvas::new(w, h, paper);
            let (mut x, mut y) = (20.0f32, hf / 2.0);
            let mut a = 0.0f32;
            for _ in 0..400 {
                a += r(rng, -0.35, 0.35);
                let (nx, ny) = (x + 3.0 * a.cos() + 0.6, y + 3.0 * a.sin());
                cv.line((x, y), (nx, ny), 2.5, ink, 0.9);
                x = nx.rem_euclid(wf);
                y = ny.clamp(10.0, hf - 10.0);
            }
        }
    }
    cv.grain(rng, 10.0);
    cv.into_image()
}

/// A colour from `table` (one of the indices in `set`), varied a little.
fn pal(rng: &mut Rng, table: &[C], set: &[usize], amount: f32) -> C {
    let c = table[set[rng.below(set.len() as u64) as usize]];
    jitter(rng, c, amount)
}

/// Ages a sheet: soft foxing stains of a browner paper tone, as old paper gathers them — a few
/// blotches of its own on every sheet, so that two drawings of one design are not the same
/// picture.
pub fn age(img: &mut RgbImage, rng: &mut Rng) {
    let (w, h) = (img.width() as f32, img.height() as f32);
    let long = w.max(h);
    let stains: Vec<(f32, f32, f32, f32, C)> = (0..3 + rng.below(5))
        .map(|_| {
            let tone = jitter(rng, [150.0, 112.0, 72.0], 25.0);
            (
                w * rng.uniform() as f32,
                h * rng.uniform() as f32,
                long * (0.06 + 0.2 * rng.uniform() as f32),
                0.2 + 0.3 * rng.uniform() as f32,
                tone,
            )
        })
        .collect();
    for (x, y, p) in img.enumerate_pixels_mut() {
        let mut c = [p[0] as f32, p[1] as f32, p[2] as f32];
        for &(cx, cy, r, alpha, tone) in &stains {
            let d2 = ((x as f32 - cx).powi(2) + (y as f32 - cy).powi(2)) / (r * r);
            if d2 < 4.0 {
                let a = alpha * (-d2 * d2).exp();
                c = mix(c, tone, a);
            }
        }
        *p = Rgb(c.map(|v| v.round().clamp(0.0, 255.0) as u8));
    }
}

/// Another scan of a sheet: cropped by up to 8 % (the cut anywhere), its tone and contrast
/// changed, turned by up to 2 degrees onto a light ground, and scanned at another resolution.
pub fn rescan(img: &RgbImage, rng: &mut Rng) -> RgbImage {
    let (w, h) = (img.width() as f32, img.height() as f32);
    let cut = 0.08 * rng.uniform() as f32;
    let (x0, y0) = (
        w * cut * rng.uniform() as f32,
        h * cut * rng.uniform() as f32,
    );
    let (cw, ch) = (w * (1.0 - cut), h * (1.0 - cut));
    let scale = 0.7 + 0.4 * rng.uniform() as f32;
    let (ow, oh) = ((cw * scale).round() as u32, (ch * scale).round() as u32);
    let turn = (rng.uniform() as f32 - 0.5) * 4.0f32.to_radians();
    let (sin, cos) = turn.sin_cos();
    let gain = 0.8 + 0.4 * rng.uniform() as f32;
    let lift = (rng.uniform() as f32 - 0.5) * 30.0;
    let ground = [236.0, 232.0, 224.0];
    RgbImage::from_fn(ow, oh, |ox, oy| {
        // The output pixel's place in the crop, turned about the crop's centre.
        let (u, v) = (ox as f32 / scale - cw / 2.0, oy as f32 / scale - ch / 2.0);
        let (sx, sy) = (
            x0 + cw / 2.0 + u * cos - v * sin,
            y0 + ch / 2.0 + u * sin + v * cos,
        );
        let c = if sx < 0.0 || sy < 0.0 || sx > w - 1.0 || sy > h - 1.0 {
            ground
        } else {
            // Bilinear.
            let (ix, iy) = (sx.floor() as u32, sy.floor() as u32);
            let (fx, fy) = (sx - ix as f32, sy - iy as f32);
            let at = |x: u32, y: u32| {
                let p = img.get_pixel(x.min(w as u32 - 1), y.min(h as u32 - 1));
                [p[0] as f32, p[1] as f32, p[2] as f32]
            };
            let top = mix(at(ix, iy), at(ix + 1, iy), fx);
            let bottom = mix(at(ix, iy + 1), at(ix + 1, iy + 1), fx);
            mix(top, bottom, fy)
        };
        Rgb(c.map(|v| {
            ((v - 128.0) * gain + 128.0 + lift)
                .round()
                .clamp(0.0, 255.0) as u8
        }))
    })
}
