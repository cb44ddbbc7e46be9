//! Lassos and rectangles being drawn: with the pointer (screen points) or from the keyboard (map
//! points dropped at the centre of the view), until they become a selection step.

use vitrine_corpus::corpus::{Op, Shape};
use vitrine_corpus::polygon::Polygon;

use crate::camera::Camera;

/// What a drag on the map does.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    Move,
    Lasso,
    Rectangle,
}

impl Mode {
    pub fn name(self) -> &'static str {
        match self {
            Mode::Move => "move",
            Mode::Lasso => "lasso",
            Mode::Rectangle => "rectangle",
        }
    }
}

/// Screen points closer than this to the last kept one are dropped from a lasso.
const LASSO_STEP_PX: f64 = 3.0;
/// A pointer that moved less than this (canvas pixels, either way) clicked rather than drew.
const CLICK_PX: f64 = 5.0;

/// A lasso or rectangle drawn with the pointer: screen points (canvas pixels) and what it will do.
#[derive(Debug, Clone, PartialEq)]
pub struct Sketch {
    pub op: Op,
    pub rectangle: bool,
    pub points: Vec<[f64; 2]>,
}

/// What a drag starting now does with these modifier keys: a sketch, or None (move the map).
/// Shift adds and Alt takes away, also without a mode (then with a lasso).
pub fn sketch_for(mode: Mode, shift: bool, alt: bool) -> Option<Sketch> {
    let op = if shift {
        Op::Add
    } else if alt {
        Op::Subtract
    } else {
        Op::Replace
    };
    match mode {
        Mode::Move if !(shift || alt) => None,
        _ => Some(Sketch {
            op,
            rectangle: mode == Mode::Rectangle,
            points: Vec::new(),
        }),
    }
}

impl Sketch {
    /// The pointer moved to `p`: a lasso gains a point (when far enough from the last), a
    /// rectangle moves its second corner.
    pub fn extend(&mut self, p: [f64; 2]) {
        let far = self
            .points
            .last()
            .is_none_or(|q| (p[0] - q[0]).hypot(p[1] - q[1]) >= LASSO_STEP_PX);
        if self.rectangle && self.points.len() >= 2 {
            self.points[1] = p;
        } else if far {
            self.points.push(p);
        }
    }

    /// Whether the pointer barely moved (a click, not a drawing).
    pub fn is_click(&self) -> bool {
        let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
        for p in &self.points {
            for k in 0..2 {
                lo[k] = lo[k].min(p[k]);
                hi[k] = hi[k].max(p[k]);
            }
        }
        self.points.len() < 2 || (hi[0] - lo[0]).max(hi[1] - lo[1]) < CLICK_PX
    }

    /// The outline to draw over the map (a rectangle's four corners), in screen points; None
    /// while there is nothing to draw.
    pub fn outline(&self) -> Option<Vec<[f64; 2]>> {
        if self.points.len() < 2 {
            return None;
        }
        Some(if self.rectangle {
            let (a, b) = (self.points[0], self.points[1]);
            vec![a, [b[0], a[1]], b, [a[0], b[1]]]
        } else {
            self.points.clone()
        })
    }

    /// The finished sketch as a shape in map coordinates, seen through `camera`.
    pub fn shape(&self, camera: &Camera) -> Shape {
        if self.rectangle {
            let (a, b) = (camera.to_map(self.points[0]), camera.to_map(self.points[1]));
            Shape::Rect([a[0], a[1], b[0], b[1]])
        } else {
            Shape::Lasso(Polygon(
                self.points.iter().map(|&q| camera.to_map(q)).collect(),
            ))
        }
    }
}

/// A lasso or rectangle drawn from the keyboard: each point is dropped at the centre of the view,
/// which the arrow and zoom keys move. Points are kept in map coordinates, so the view may move
/// between them.
#[derive(Debug, Clone, PartialEq)]
pub struct KeySketch {
    pub op: Op,
    pub rectangle: bool,
    pub points: Vec<[f64; 2]>,
}

impl KeySketch {
    /// Whether it can become a shape now (a rectangle's two corners, a lasso's three points);
    /// else what it still needs, in words.
    pub fn missing(&self) -> Option<&'static str> {
        if self.rectangle {
            (self.points.len() < 2)
                .then_some("A rectangle needs its other corner: move the view and press Enter.")
        } else {
            (self.points.len() < 3).then_some(
                "A lasso needs three points at least: move the view and press Enter for each.",
            )
        }
    }

    /// The hint beside the crosshair after the `n`th point.
    pub fn hint(&self) -> String {
        if self.rectangle {
            "corner 1 — move the view, Enter for the other corner".to_string()
        } else {
            format!(
                "point {} — move the view, Enter for the next; Space closes, Escape drops",
                self.points.len()
            )
        }
    }

    /// The shape, once complete.
    pub fn shape(&self) -> Option<Shape> {
        if self.missing().is_some() {
            return None;
        }
        Some(if self.rectangle {
            let (a, b) = (self.points[0], self.points[1]);
            Shape::Rect([a[0], a[1], b[0], b[1]])
        } else {
            Shape::Lasso(Polygon(self.points.clone()))
        })
    }

    /// As drawn over the map now: its points on screen joined to the centre of the view.
    pub fn on_screen(&self, camera: &Camera) -> Sketch {
        let mut points: Vec<[f64; 2]> = self
            .points
            .iter()
            .map(|&p| camera.to_screen([p[0] as f32, p[1] as f32]))
            .collect();
        points.push([camera.size[0] / 2.0, camera.size[1] / 2.0]);
        Sketch {
            op: self.op,
            rectangle: self.rectangle,
            points,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn modifiers_and_modes_choose_the_sketch() {
        assert!(sketch_for(Mode::Move, false, false).is_none());
        let s = sketch_for(Mode::Move, true, false).unwrap();
        assert_eq!((s.op, s.rectangle), (Op::Add, false));
        let s = sketch_for(Mode::Rectangle, false, true).unwrap();
        assert_eq!((s.op, s.rectangle), (Op::Subtract, true));
        assert_eq!(
            sketch_for(Mode::Lasso, false, false).unwrap().op,
            Op::Replace
        );
    }

    #[test]
    fn a_lasso_skips_near_points_and_a_rectangle_keeps_two_corners() {
        let mut l = sketch_for(Mode::Lasso, false, false).unwrap();
        for p in [[0.0, 0.0], [1.0, 1.0], [10.0, 0.0], [10.0, 10.0]] {
            l.extend(p);
        }
        assert_eq!(l.points, vec![[0.0, 0.0], [10.0, 0.0], [10.0, 10.0]]);
        assert!(!l.is_click());
        let mut r = sketch_for(Mode::Rectangle, false, false).unwrap();
        for p in [[0.0, 0.0], [10.0, 0.0], [20.0, 30.0]] {
            r.extend(p);
        }
        assert_eq!(r.points, vec![[0.0, 0.0], [20.0, 30.0]]);
        assert_eq!(
            r.outline().unwrap(),
            vec![[0.0, 0.0], [20.0, 0.0], [20.0, 30.0], [0.0, 30.0]]
        );
        let mut click = sketch_for(Mode::Lasso, false, false).unwrap();
        click.extend([5.0, 5.0]);
        click.extend([8.0, 7.0]);
        assert!(click.is_click());
    }

    #[test]
    fn a_drawn_rectangle_becomes_map_coordinates() {
        let cam = Camera::fit([0.0, 0.0, 10.0, 10.0], [100.0, 100.0]);
        let mut r = sketch_for(Mode::Rectangle, false, false).unwrap();
        r.extend(cam.to_screen([2.0, 3.0]));
        r.extend(cam.to_screen([6.0, 8.0]));
        let Shape::Rect(q) = r.shape(&cam) else {
            panic!("not a rectangle")
        };
        for (got, want) in q.iter().zip([2.0, 3.0, 6.0, 8.0]) {
            assert!((got - want).abs() < 1e-9, "{q:?}");
        }
    }

    #[test]
    fn a_keyboard_sketch_says_what_it_lacks_until_complete() {
        let mut k = KeySketch {
            op: Op::Replace,
            rectangle: false,
            points: vec![[0.0, 0.0], [1.0, 0.0]],
        };
        assert!(k.missing().unwrap().contains("three points"));
        assert!(k.shape().is_none());
        k.points.push([1.0, 1.0]);
        assert!(matches!(k.shape(), Some(Shape::Lasso(p)) if p.0.len() == 3));
        let r = KeySketch {
            op: Op::Add,
            rectangle: true,
            points: vec![[0.0, 0.0]],
        };
        assert!(r.missing().unwrap().contains("other corner"));
        // On screen, the last point is the centre of the view, where the next will drop.
        let cam = Camera::fit([0.0, 0.0, 10.0, 10.0], [200.0, 100.0]);
        let s = r.on_screen(&cam);
        assert_eq!(s.points.last(), Some(&[100.0, 50.0]));
        assert_eq!(s.points.len(), 2);
    }
}
