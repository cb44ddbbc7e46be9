//! The selection as the viewer holds it: steps with undo and redo, the items they pick, and how
//! every item is drawn given the selection and the filters. Plain Rust, no DOM.

use vitrine_corpus::corpus::{covered, replay, Lookup, Op, Shape, Step};
use vitrine_corpus::mask::Mask;
use vitrine_corpus::CorpusError;

use crate::raster::Tones;

/// Selection steps with their history; the steps are drawn on one map (`map`), which the
/// history keeps with them.
#[derive(Default)]
pub struct Selection {
    steps: Vec<Step>,
    /// The map (its index in the atlas) the steps were drawn on.
    pub map: usize,
    past: Vec<(usize, Vec<Step>)>,
    future: Vec<(usize, Vec<Step>)>,
    mask: Option<Mask>,
    /// Changes whenever the selected items may have changed.
    pub generation: u64,
}

impl Selection {
    pub fn steps(&self) -> &[Step] {
        &self.steps
    }

    /// The selected items, or None when nothing has been chosen.
    pub fn mask(&self) -> Option<&Mask> {
        self.mask.as_ref()
    }

    /// Applies a step (a lasso, a rectangle, items by id, everything) to the selection; `at`
    /// looks up positions on map `self.map`.
    pub fn push(&mut self, step: Step, at: &Lookup) -> Result<(), CorpusError> {
        self.push_all(vec![step], at)
    }

    /// Applies several steps as one change (one undo takes them all back); nothing changes if
    /// one of them fails.
    pub fn push_all(&mut self, steps: Vec<Step>, at: &Lookup) -> Result<(), CorpusError> {
        let n = at.positions.len();
        let mut sel = self.mask.clone().unwrap_or_else(|| Mask::none(n));
        for step in &steps {
            let m = covered(&step.shape, at)?;
            match step.op {
                Op::Replace => sel = m,
                Op::Add => sel.or(&m),
                Op::Subtract => sel.subtract(&m),
            }
        }
        self.past.push((self.map, self.steps.clone()));
        self.future.clear();
        self.steps.extend(steps);
        self.mask = Some(sel);
        self.generation += 1;
        Ok(())
    }

    /// Takes items (by id) out of the corpus as one change: out of the selection, or, when
    /// nothing is selected by hand (the corpus is what the filters leave), out of everything.
    pub fn remove_ids(&mut self, ids: Vec<String>, at: &Lookup) -> Result<(), CorpusError> {
        let mut steps = Vec::new();
        if self.mask.is_none() {
            steps.push(Step {
                op: Op::Replace,
                shape: Shape::Everything(Default::default()),
            });
        }
        steps.push(Step {
            op: Op::Subtract,
            shape: Shape::Ids(ids),
        });
        self.push_all(steps, at)
    }

    /// Forgets every step (undoable).
    pub fn clear(&mut self) {
        if self.steps.is_empty() {
            return;
        }
        self.past.push((self.map, std::mem::take(&mut self.steps)));
        self.future.clear();
        self.mask = None;
        self.generation += 1;
    }

    /// Puts back the steps (and their map) as they were before the last change; false when there
    /// is none. The selected items then need [`Selection::recompute`] on the restored map.
    pub fn undo(&mut self) -> bool {
        self.walk(true)
    }

    pub fn redo(&mut self) -> bool {
        self.walk(false)
    }

    /// One step back in the history (undo) or forward (redo); the state left goes to the other
    /// side.
    fn walk(&mut self, back: bool) -> bool {
        let (from, to) = if back {
            (&mut self.past, &mut self.future)
        } else {
            (&mut self.future, &mut self.past)
        };
        let Some((map, steps)) = from.pop() else {
            return false;
        };
        to.push((self.map, std::mem::replace(&mut self.steps, steps)));
        self.map = map;
        self.mask = None;
        self.generation += 1;
        true
    }

    /// The selected items again from the steps (`at` on map `self.map`).
    pub fn recompute(&mut self, at: &Lookup) -> Result<(), CorpusError> {
        self.mask = replay(&self.steps, at)?;
        self.generation += 1;
        Ok(())
    }

    /// Replaces the steps (a corpus file or a shared link opened), drawn on `map`: one undoable
    /// change. `at` must look up positions on `map`. Nothing changes if the steps fail.
    pub fn set_steps(
        &mut self,
        map: usize,
        steps: Vec<Step>,
        at: &Lookup,
    ) -> Result<(), CorpusError> {
        let mask = replay(&steps, at)?;
        self.past
            .push((self.map, std::mem::replace(&mut self.steps, steps)));
        self.map = map;
        self.future.clear();
        self.mask = mask;
        self.generation += 1;
        Ok(())
    }

    /// Whether any step, now or in the history, names items by id.
    pub fn names_items(&self) -> bool {
        let names = |steps: &[Step]| steps.iter().any(|s| matches!(s.shape, Shape::Ids(_)));
        names(&self.steps)
            || self.past.iter().any(|(_, s)| names(s))
            || self.future.iter().any(|(_, s)| names(s))
    }

    /// Whether an undo or a redo is possible.
    pub fn history(&self) -> (bool, bool) {
        (!self.past.is_empty(), !self.future.is_empty())
    }
}

/// Weight of an item's own colour or picture when a selection is shown and it is not in it.
pub const UNSELECTED_WEIGHT: u16 = 80;
/// Weight of an item the filters leave out (when it is dimmed rather than hidden).
pub const FILTERED_WEIGHT: u16 = 40;

/// How each item is drawn: full where it is in the corpus, faint where a selection exists and it
/// is not selected, fainter (or hidden) where the filters leave it out. None when nothing is
/// chosen and no filter is active (every item full).
pub fn tones(
    colours: &[[u8; 4]],
    paper: [u8; 3],
    selected: Option<&Mask>,
    passing: Option<&Mask>,
    hide_filtered: bool,
) -> Option<Tones> {
    tones_within(colours, paper, selected, passing, hide_filtered, None)
}

/// As [`tones`], the colours made only for the items of `runs` when given (a tiled atlas's items
/// whose colours are here; a leaf's are made as it arrives), the others left hidden.
pub fn tones_within(
    colours: &[[u8; 4]],
    paper: [u8; 3],
    selected: Option<&Mask>,
    passing: Option<&Mask>,
    hide_filtered: bool,
    runs: Option<&[[u64; 2]]>,
) -> Option<Tones> {
    if selected.is_none() && passing.is_none() {
        return None;
    }
    let weight: Vec<u16> = (0..colours.len())
        .map(|i| {
            if passing.is_some_and(|p| !p.get(i)) {
                if hide_filtered {
                    0
                } else {
                    FILTERED_WEIGHT
                }
            } else if selected.is_some_and(|s| !s.get(i)) {
                UNSELECTED_WEIGHT
            } else {
                256
            }
        })
        .collect();
    let colours = match runs {
        None => colours
            .iter()
            .zip(&weight)
            .map(|(&c, &w)| tone(c, w, paper))
            .collect(),
        Some(runs) => {
            let mut out = vec![[0u8; 4]; colours.len()];
            for &[a, b] in runs {
                for i in a as usize..(b as usize).min(colours.len()) {
                    out[i] = tone(colours[i], weight[i], paper);
                }
            }
            out
        }
    };
    Some(Tones { colours, weight })
}

/// An item's mark colour `c` at tone weight `w` (out of 256; 0 = hidden), mixed towards `paper`.
pub fn tone(c: [u8; 4], w: u16, paper: [u8; 3]) -> [u8; 4] {
    let m = |a: u8, p: u8| ((a as u32 * w as u32 + p as u32 * (256 - w as u32) + 128) >> 8) as u8;
    match w {
        0 => [0, 0, 0, 0],
        256 => c,
        _ => [m(c[0], paper[0]), m(c[1], paper[1]), m(c[2], paper[2]), 255],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_corpus::polygon::Polygon;

    /// Runs `f` with a lookup on 100 items at the integer points of a 10 x 10 grid, whose ids
    /// are their numbers.
    fn on_grid(f: impl FnOnce(&Lookup)) {
        let positions: Vec<[f32; 2]> = (0..100)
            .map(|i| [(i % 10) as f32, (i / 10) as f32])
            .collect();
        let index_of = |id: &str| id.parse::<usize>().ok();
        f(&Lookup {
            positions: &positions,
            index_of: &index_of,
            near: None,
            runs: None,
        })
    }

    #[test]
    fn steps_undo_and_redo_through_clear() {
        on_grid(|at| {
            let mut s = Selection::default();
            let rect = |op, r| Step {
                op,
                shape: Shape::Rect(r),
            };
            s.push(rect(Op::Replace, [-0.5, -0.5, 2.5, 2.5]), at)
                .unwrap(); // 9
            s.push(rect(Op::Add, [6.5, 6.5, 9.5, 9.5]), at).unwrap(); // + 9
            let lasso = Polygon::parse("-1,-1 0.5,-1 0.5,0.5 -1,0.5").unwrap(); // item 0
            s.push(
                Step {
                    op: Op::Subtract,
                    shape: Shape::Lasso(lasso),
                },
                at,
            )
            .unwrap();
            assert_eq!(s.mask().unwrap().count(), 17);
            s.clear();
            assert!(s.mask().is_none());
            let undo = |s: &mut Selection| {
                let done = s.undo();
                s.recompute(at).unwrap();
                done
            };
            assert!(undo(&mut s));
            assert_eq!(s.mask().unwrap().count(), 17);
            assert!(undo(&mut s));
            assert_eq!(s.mask().unwrap().count(), 18);
            assert!(s.redo());
            s.recompute(at).unwrap();
            assert_eq!(s.mask().unwrap().count(), 17);
            // A new step forgets what could be redone.
            s.push(rect(Op::Add, [-0.5, -0.5, 0.5, 0.5]), at).unwrap();
            assert_eq!(s.history(), (true, false));
            assert_eq!(s.mask().unwrap().count(), 18);
            while undo(&mut s) {}
            assert!(s.mask().is_none() && s.steps().is_empty());
            // The history keeps each state's map: steps drawn on map 0, cleared, then drawn on map 1;
            // undoing back past the clear returns to map 0's steps and map 0.
            s.push(rect(Op::Replace, [-0.5, -0.5, 2.5, 2.5]), at)
                .unwrap();
            s.clear();
            s.map = 1;
            s.push(rect(Op::Replace, [6.5, 6.5, 9.5, 9.5]), at).unwrap();
            assert!(s.undo() && s.map == 1 && s.steps().is_empty());
            assert!(s.undo() && s.map == 0 && s.steps().len() == 1);
        });
    }

    #[test]
    fn removing_items_from_the_tray_is_one_undoable_change() {
        on_grid(|at| {
            // Nothing selected by hand (the corpus is what the filters leave): removing two items
            // selects everything but them, in one step of the history.
            let mut s = Selection::default();
            s.remove_ids(vec!["3".into(), "40".into()], at).unwrap();
            let m = s.mask().unwrap();
            assert_eq!(m.count(), 98);
            assert!(!m.get(3) && !m.get(40) && m.get(4));
            assert_eq!(s.steps().len(), 2);
            assert!(s.undo());
            s.recompute(at).unwrap();
            assert!(s.mask().is_none() && !s.history().0);
            // With a selection: only the items go.
            s.push(
                Step {
                    op: Op::Replace,
                    shape: Shape::Rect([-0.5, -0.5, 2.5, 2.5]),
                },
                at,
            )
            .unwrap();
            s.remove_ids(vec!["11".into()], at).unwrap();
            assert_eq!(s.mask().unwrap().count(), 8);
            assert_eq!(s.steps().len(), 2);
            // An id the atlas does not have changes nothing.
            assert!(s.remove_ids(vec!["nope".into()], at).is_err());
            assert_eq!(s.mask().unwrap().count(), 8);
            assert_eq!(s.steps().len(), 2);
        });
    }

    #[test]
    fn tones_dim_what_is_outside_the_corpus() {
        let colours = vec![[200, 100, 0, 255]; 4];
        let paper = [250, 250, 250];
        assert!(tones(&colours, paper, None, None, false).is_none());
        let sel = Mask::from_items(4, [0, 1]);
        let pass = Mask::from_items(4, [1, 2]);
        let t = tones(&colours, paper, Some(&sel), Some(&pass), false).unwrap();
        assert_eq!(
            t.weight,
            [FILTERED_WEIGHT, 256, UNSELECTED_WEIGHT, FILTERED_WEIGHT]
        );
        assert_eq!(t.colours[1], colours[1]);
        // Dimmed towards the paper: 80/256 of the colour.
        assert_eq!(t.colours[2][0], ((200 * 80 + 250 * 176 + 128) >> 8) as u8);
        let hidden = tones(&colours, paper, None, Some(&pass), true).unwrap();
        assert_eq!(hidden.weight, [0, 256, 256, 0]);
        assert_eq!(hidden.colours[0][3], 0);
    }
}
