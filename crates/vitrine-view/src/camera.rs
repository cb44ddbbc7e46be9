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
}
