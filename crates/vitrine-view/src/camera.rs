//! The camera: which part of a map is on screen. Screen coordinates are CSS-independent device pixels,
//! origin top left, y down; map y grows upwards, as on a chart.

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Camera {
    /// Map point at the centre of the screen.
    pub centre: [f64; 2],
    /// Screen pixels per map unit.
    pub zoom: f64,
    /// Screen size in pixels.
    pub size: [f64; 2],
}

pub const MIN_ZOOM_FACTOR: f64 = 0.25;
pub const MAX_ZOOM_FACTOR: f64 = 4000.0;

impl Camera {
    /// The view that shows `bounds` ([min_x, min_y, max_x, max_y]) whole, with a margin.
    pub fn fit(bounds: [f32; 4], size: [f64; 2]) -> Camera {
        let w = (bounds[2] - bounds[0]).max(1e-6) as f64;
        let h = (bounds[3] - bounds[1]).max(1e-6) as f64;
        let zoom = (size[0] / w).min(size[1] / h) * 0.92;
        Camera {
            centre: [
                (bounds[0] + bounds[2]) as f64 / 2.0,
                (bounds[1] + bounds[3]) as f64 / 2.0,
            ],
            zoom,
            size,
        }
    }
    #[inline]
    pub fn to_screen(&self, p: [f32; 2]) -> [f64; 2] {
        [
            (p[0] as f64 - self.centre[0]) * self.zoom + self.size[0] / 2.0,
            (self.centre[1] - p[1] as f64) * self.zoom + self.size[1] / 2.0,
        ]
    }
    pub fn to_map(&self, s: [f64; 2]) -> [f64; 2] {
        [
            (s[0] - self.size[0] / 2.0) / self.zoom + self.centre[0],
            self.centre[1] - (s[1] - self.size[1] / 2.0) / self.zoom,
        ]
    }
    /// Moves the map with the pointer by (dx, dy) screen pixels.
    pub fn pan(&mut self, dx: f64, dy: f64) {
        self.centre[0] -= dx / self.zoom;
        self.centre[1] += dy / self.zoom;
    }
    /// Zooms by `factor` keeping the map point under `at` (screen) fixed, within `limits` of zoom.
    pub fn zoom_at(&mut self, at: [f64; 2], factor: f64, limits: [f64; 2]) {
        let before = self.to_map(at);
        self.zoom = (self.zoom * factor).clamp(limits[0], limits[1]);
        let after = self.to_map(at);
        self.centre[0] += before[0] - after[0];
        self.centre[1] += before[1] - after[1];
    }
    /// The visible map rectangle [min_x, min_y, max_x, max_y], grown by `margin` screen pixels.
    pub fn visible(&self, margin: f64) -> [f64; 4] {
        let a = self.to_map([-margin, self.size[1] + margin]);
        let b = self.to_map([self.size[0] + margin, -margin]);
        [a[0], a[1], b[0], b[1]]
    }
}

/// An animated move from one camera to another: zoom changes geometrically and every point on
/// screen travels on a straight line towards the one point that both cameras show at the same
/// place (the point under the pointer for a wheel zoom); with no change of zoom it is a plain
/// slide. Eased out, so the view answers at once and settles softly.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Glide {
    pub from: Camera,
    pub to: Camera,
    /// Start time and length in milliseconds.
    pub start: f64,
    pub duration: f64,
}

impl Glide {
    pub fn new(from: Camera, to: Camera, start: f64, duration: f64) -> Glide {
        Glide {
            from,
            to,
            start,
            duration,
        }
    }

    /// Eased progress in [0, 1] at time `now`.
    fn progress(&self, now: f64) -> f64 {
        if self.duration <= 0.0 {
            return 1.0;
        }
        let t = ((now - self.start) / self.duration).clamp(0.0, 1.0);
        1.0 - (1.0 - t).powi(3)
    }

    pub fn done(&self, now: f64) -> bool {
        self.progress(now) >= 1.0
    }

    /// The camera at time `now`: `from` at the start, exactly `to` at the end.
    pub fn at(&self, now: f64) -> Camera {
        let e = self.progress(now);
        if e >= 1.0 {
            return self.to;
        }
        if e <= 0.0 {
            return self.from;
        }
        let (a, b) = (&self.from, &self.to);
        let mut c = *b;
        let ratio = b.zoom / a.zoom;
        let (hw, hh) = (b.size[0] / 2.0, b.size[1] / 2.0);
        if (ratio - 1.0).abs() < 1e-9 {
            c.zoom = b.zoom;
            for k in 0..2 {
                c.centre[k] = a.centre[k] + (b.centre[k] - a.centre[k]) * e;
            }
            return c;
        }
        // The fixed point f on screen: a.to_map(f) == b.to_map(f).
        let inv = 1.0 / b.zoom - 1.0 / a.zoom;
        let fx = hw + (a.centre[0] - b.centre[0]) / inv;
        let fy = hh - (a.centre[1] - b.centre[1]) / inv;
        let m = a.to_map([fx, fy]);
        c.zoom = a.zoom * ratio.powf(e);
        c.centre = [m[0] - (fx - hw) / c.zoom, m[1] + (fy - hh) / c.zoom];
        c
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fit_shows_the_bounds_centred() {
        let c = Camera::fit([-10.0, -5.0, 10.0, 5.0], [800.0, 600.0]);
        let s = c.to_screen([0.0, 0.0]);
        assert_eq!(s, [400.0, 300.0]);
        let corner = c.to_screen([-10.0, 5.0]);
        assert!(corner[0] > 0.0 && corner[0] < 60.0 && corner[1] > 0.0);
        // y up on the map is up on screen.
        assert!(c.to_screen([0.0, 1.0])[1] < 300.0);
    }

    #[test]
    fn screen_and_map_round_trip_and_zoom_keeps_the_anchor() {
        let mut c = Camera::fit([0.0, 0.0, 1.0, 1.0], [640.0, 480.0]);
        let p = [123.0, 77.0];
        let m = c.to_map(p);
        let back = c.to_screen([m[0] as f32, m[1] as f32]);
        assert!((back[0] - p[0]).abs() < 1e-3 && (back[1] - p[1]).abs() < 1e-3);
        c.zoom_at(p, 3.0, [1e-9, 1e9]);
        let m2 = c.to_map(p);
        assert!((m2[0] - m[0]).abs() < 1e-9 && (m2[1] - m[1]).abs() < 1e-9);
        c.zoom_at(p, 1e12, [1.0, 5000.0]);
        assert_eq!(c.zoom, 5000.0);
    }

    #[test]
    fn pan_follows_the_pointer() {
        let mut c = Camera::fit([0.0, 0.0, 10.0, 10.0], [100.0, 100.0]);
        let before = c.to_screen([5.0, 5.0]);
        c.pan(10.0, -4.0);
        let after = c.to_screen([5.0, 5.0]);
        assert!(
            (after[0] - before[0] - 10.0).abs() < 1e-9 && (after[1] - before[1] + 4.0).abs() < 1e-9
        );
    }

    #[test]
    fn a_glide_starts_and_ends_on_its_cameras_and_keeps_the_zoom_anchor_still() {
        let a = Camera::fit([0.0, 0.0, 10.0, 10.0], [800.0, 600.0]);
        let anchor = [620.0, 130.0];
        let mut b = a;
        b.zoom_at(anchor, 6.0, [1e-9, 1e9]);
        let g = Glide::new(a, b, 1000.0, 200.0);
        assert_eq!(g.at(900.0), a);
        assert_eq!(g.at(1200.0), b);
        assert!(g.done(1200.0) && !g.done(1100.0));
        let m = a.to_map(anchor);
        let mut last = a.zoom;
        for t in (1000..=1200).step_by(10) {
            let c = g.at(t as f64);
            let s = c.to_screen([m[0] as f32, m[1] as f32]);
            assert!(
                (s[0] - anchor[0]).abs() < 1e-3 && (s[1] - anchor[1]).abs() < 1e-3,
                "{t}: {s:?}"
            );
            assert!(c.zoom >= last, "zoom grows monotonically");
            last = c.zoom;
        }
        // Eased out: more than half the way (in log zoom) after a third of the time.
        let third = g.at(1000.0 + 200.0 / 3.0).zoom;
        assert!((third / a.zoom).ln() > 0.5 * (b.zoom / a.zoom).ln());
    }

    #[test]
    fn a_glide_without_zoom_slides_in_a_straight_line_and_zero_duration_jumps() {
        let a = Camera::fit([0.0, 0.0, 10.0, 10.0], [800.0, 600.0]);
        let mut b = a;
        b.pan(300.0, -120.0);
        let g = Glide::new(a, b, 0.0, 100.0);
        let c = g.at(50.0);
        assert_eq!(c.zoom, a.zoom);
        let e = (c.centre[0] - a.centre[0]) / (b.centre[0] - a.centre[0]);
        assert!(e > 0.5 && e < 1.0);
        assert!(((c.centre[1] - a.centre[1]) / (b.centre[1] - a.centre[1]) - e).abs() < 1e-9);
        assert_eq!(Glide::new(a, b, 0.0, 0.0).at(0.0), b);
    }
}
