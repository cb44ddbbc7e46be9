//! The viewer's coding: the codebook and every code in the browser, the walk through the corpus in
//! the coding view, its keys, and undo. Platform-free: the page draws what this decides and stores
//! what it changes.

use std::collections::HashMap;

use vitrine_corpus::coding::{Code, CodeValue, Codebook, Coded, Kind, Variable};

/// The order the coding view walks the corpus in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Order {
    /// Items this coder has not finished first (in map order), then the rest.
    UncodedFirst,
    /// The atlas's order: along the similarity map (items are stored in its spatial order).
    Map,
    /// By the start of the dating, undated last.
    Date,
    /// Shuffled with this seed (the same seed, the same order).
    Random(u64),
}

impl Order {
    pub fn name(self) -> String {
        match self {
            Order::UncodedFirst => "uncoded first".into(),
            Order::Map => "map".into(),
            Order::Date => "date".into(),
            Order::Random(s) => format!("random (seed {s})"),
        }
    }
}

/// The coding view's walk: the items in order, where it stands, the variable in hand.
#[derive(Debug, Clone, PartialEq)]
pub struct Walk {
    pub order: Vec<u32>,
    pub pos: usize,
    pub variable: usize,
    pub how: Order,
    /// Whether an item (by index) is in the walk.
    member: Vec<bool>,
    /// Items of the walk this coder coded, per variable; items with every variable coded. Kept
    /// up to date code by code, so that a step costs the same for a corpus of any size.
    coded: Vec<usize>,
    finished: usize,
}

/// One change, to undo.
#[derive(Debug, Clone, PartialEq)]
struct Change {
    index: usize,
    item: String,
    variable: String,
    before: Option<Code>,
    pos: usize,
    var_index: usize,
}

/// What a key did in the coding view.
#[derive(Debug, Clone, PartialEq)]
pub enum Effect {
    /// Nothing (the key is not the coding view's).
    None,
    /// The codes changed (store them) and the view is drawn again.
    Coded,
    /// The view moved (another item or variable): drawn again.
    Moved,
    /// Start typing into the current variable's field (a number or a note), with this text.
    Type(String),
    /// Close the coding view.
    Close,
}

/// The codebook, the codes, the coder and the walk.
#[derive(Debug, Default)]
pub struct Coding {
    pub book: Codebook,
    pub codes: Vec<Code>,
    /// Where each (item, variable, coder, settled) code is in `codes`.
    index: HashMap<(String, String, String, bool), usize>,
    /// Whose codes the view sets.
    pub coder: String,
    pub walk: Option<Walk>,
    undo: Vec<Change>,
    /// Changes with every change of the codebook or codes (the page stores them when it moves).
    pub generation: u64,
}

/// The number key of each value of a choice variable: its own key, else the lowest key 1-9 no
/// other value has (values beyond the ninth key have none).
pub fn value_keys(var: &Variable) -> Vec<Option<u8>> {
    let mut taken: Vec<u8> = var.values.iter().filter_map(|d| d.key).collect();
    var.values
        .iter()
        .map(|d| {
            d.key.or_else(|| {
                let k = (1..=9u8).find(|k| !taken.contains(k))?;
                taken.push(k);
                Some(k)
            })
        })
        .collect()
}

fn splitmix(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl Coding {
    /// Replaces the codebook and codes (an opened corpus file, or what the browser kept).
    pub fn load(&mut self, book: Codebook, codes: Vec<Code>) {
        self.book = book;
        self.codes = codes;
        self.reindex();
        self.undo.clear();
        self.generation += 1;
    }

    fn reindex(&mut self) {
        self.index = self
            .codes
            .iter()
            .enumerate()
            .map(|(i, c)| {
                (
                    (
                        c.item.clone(),
                        c.variable.clone(),
                        c.coder.clone(),
                        c.settled,
                    ),
                    i,
                )
            })
            .collect();
    }

    /// This coder's code of `item` for `variable`.
    pub fn code(&self, item: &str, variable: &str) -> Option<&Code> {
        self.index
            .get(&(
                item.to_string(),
                variable.to_string(),
                self.coder.clone(),
                false,
            ))
            .map(|&i| &self.codes[i])
    }

    /// Sets (or with None clears) this coder's code of item `index` (id `item`) for `variable`,
    /// at `time`; kept for undo. Returns whether anything changed.
    pub fn set(
        &mut self,
        index: usize,
        item: &str,
        variable: &str,
        value: Option<CodeValue>,
        time: &str,
    ) -> bool {
        let key = (
            item.to_string(),
            variable.to_string(),
            self.coder.clone(),
            false,
        );
        let before = self.index.get(&key).map(|&i| self.codes[i].clone());
        if before.as_ref().map(|c| &c.value) == value.as_ref() {
            return false;
        }
        let (pos, var_index) = self.walk.as_ref().map_or((0, 0), |w| (w.pos, w.variable));
        self.undo.push(Change {
            index,
            item: item.into(),
            variable: variable.into(),
            before: before.clone(),
            pos,
            var_index,
        });
        let code = value.map(|v| Code {
            item: item.into(),
            variable: variable.into(),
            value: v,
            coder: self.coder.clone(),
            time: time.into(),
            settled: false,
        });
        self.put_counted(index, key, code);
        true
    }

    /// [`Coding::put`], keeping the walk's counts.
    fn put_counted(
        &mut self,
        index: usize,
        key: (String, String, String, bool),
        code: Option<Code>,
    ) {
        let in_walk = self
            .walk
            .as_ref()
            .is_some_and(|w| w.member.get(index).copied().unwrap_or(false));
        let var = self.book.variables.iter().position(|v| v.name == key.1);
        let (was, was_finished) = (
            self.index.contains_key(&key),
            in_walk && self.finished(&key.0),
        );
        let id = key.0.clone();
        let now = code.is_some();
        self.put(key, code);
        if in_walk {
            let finished = self.finished(&id);
            let w = self.walk.as_mut().unwrap();
            if let Some(v) = var {
                match (was, now) {
                    (false, true) => w.coded[v] += 1,
                    (true, false) => w.coded[v] -= 1,
                    _ => {}
                }
            }
            match (was_finished, finished) {
                (false, true) => w.finished += 1,
                (true, false) => w.finished -= 1,
                _ => {}
            }
        }
    }

    fn put(&mut self, key: (String, String, String, bool), code: Option<Code>) {
        match (self.index.get(&key).copied(), code) {
            (Some(i), Some(c)) => self.codes[i] = c,
            (None, Some(c)) => {
                self.index.insert(key, self.codes.len());
                self.codes.push(c);
            }
            (Some(i), None) => {
                self.codes.remove(i);
                self.reindex();
            }
            (None, None) => {}
        }
        self.generation += 1;
    }

    /// Undoes the last change; the walk goes back to where it was made. False when there is none.
    pub fn undo(&mut self) -> bool {
        let Some(ch) = self.undo.pop() else {
            return false;
        };
        let key = (ch.item, ch.variable, self.coder.clone(), false);
        self.put_counted(ch.index, key, ch.before);
        if let Some(w) = &mut self.walk {
            w.pos = ch.pos.min(w.order.len().saturating_sub(1));
            w.variable = ch.var_index;
        }
        true
    }

    /// Whether this coder has coded every variable (notes aside) of `item`.
    pub fn finished(&self, item: &str) -> bool {
        self.book
            .variables
            .iter()
            .filter(|v| v.kind != Kind::Note)
            .all(|v| self.code(item, &v.name).is_some())
    }

    /// Starts a walk over `items` (atlas order) in `how`; `start_years` orders by date.
    pub fn start(
        &mut self,
        items: &[u32],
        how: Order,
        ids: &dyn Fn(usize) -> String,
        start_years: Option<&[i32]>,
    ) {
        let mut order = items.to_vec();
        match how {
            Order::Map => {}
            Order::UncodedFirst => {
                order.sort_by_key(|&i| self.finished(&ids(i as usize)));
            }
            Order::Date => {
                if let Some(s) = start_years {
                    order.sort_by_key(|&i| {
                        let y = s[i as usize];
                        (y == i32::MIN, y)
                    });
                }
            }
            Order::Random(seed) => {
                let mut st = seed;
                for k in (1..order.len()).rev() {
                    let j = (splitmix(&mut st) % (k as u64 + 1)) as usize;
                    order.swap(k, j);
                }
            }
        }
        let mut member = vec![false; items.iter().map(|&i| i as usize + 1).max().unwrap_or(0)];
        for &i in items {
            member[i as usize] = true;
        }
        self.walk = Some(Walk {
            order,
            pos: 0,
            variable: 0,
            how,
            member,
            coded: vec![],
            finished: 0,
        });
        self.recount(ids);
    }

    /// Counts the walk's coded and finished items anew (after a change of many codes).
    pub fn recount(&mut self, ids: &dyn Fn(usize) -> String) {
        let Some(w) = &self.walk else { return };
        let mut coded = vec![0; self.book.variables.len()];
        let mut finished = 0;
        for &i in &w.order {
            let id = ids(i as usize);
            let mut all = true;
            for (k, v) in self.book.variables.iter().enumerate() {
                if self.code(&id, &v.name).is_some() {
                    coded[k] += 1;
                } else if v.kind != Kind::Note {
                    all = false;
                }
            }
            finished += usize::from(all);
        }
        let w = self.walk.as_mut().unwrap();
        w.coded = coded;
        w.finished = finished;
    }

    /// The item the walk stands on.
    pub fn current(&self) -> Option<usize> {
        let w = self.walk.as_ref()?;
        w.order.get(w.pos).map(|&i| i as usize)
    }

    /// Coded / total per variable over the walk's items, for this coder.
    pub fn progress(&self) -> Vec<(String, usize, usize)> {
        let Some(w) = &self.walk else { return vec![] };
        self.book
            .variables
            .iter()
            .zip(&w.coded)
            .map(|(v, &n)| (v.name.clone(), n, w.order.len()))
            .collect()
    }

    /// Items of the walk every variable of which (notes aside) this coder has coded.
    pub fn finished_count(&self) -> usize {
        self.walk.as_ref().map_or(0, |w| w.finished)
    }

    fn step(&mut self, by: isize) -> Effect {
        let Some(w) = &mut self.walk else {
            return Effect::None;
        };
        let to = (w.pos as isize + by).clamp(0, w.order.len().saturating_sub(1) as isize) as usize;
        if to == w.pos {
            return Effect::None;
        }
        w.pos = to;
        w.variable = 0;
        Effect::Moved
    }

    /// A key in the coding view, at `time` (for the codes it sets). `ids` names items.
    pub fn key(
        &mut self,
        key: &str,
        ctrl: bool,
        time: &str,
        ids: &dyn Fn(usize) -> String,
    ) -> Effect {
        let Some(w) = &self.walk else {
            return Effect::None;
        };
        if ctrl {
            return match key {
                "z" | "Z" if self.undo() => Effect::Coded,
                _ => Effect::None,
            };
        }
        let nv = self.book.variables.len();
        let vi = w.variable.min(nv.saturating_sub(1));
        match key {
            "ArrowRight" | "Enter" | "j" | "PageDown" => return self.step(1),
            "ArrowLeft" | "k" | "PageUp" => return self.step(-1),
            "Home" => return self.step(-(w.pos as isize)),
            "End" => return self.step(w.order.len() as isize),
            "Escape" => return Effect::Close,
            "ArrowDown" | "Tab" => {
                let w = self.walk.as_mut().unwrap();
                if nv > 0 {
                    w.variable = (vi + 1) % nv;
                }
                return Effect::Moved;
            }
            "ArrowUp" => {
                let w = self.walk.as_mut().unwrap();
                if nv > 0 {
                    w.variable = (vi + nv - 1) % nv;
                }
                return Effect::Moved;
            }
            _ => {}
        }
        let (Some(item), Some(var)) = (self.current(), self.book.variables.get(vi).cloned()) else {
            return Effect::None;
        };
        let id = ids(item);
        let now = self.code(&id, &var.name).map(|c| c.value.clone());
        if matches!(key, "Backspace" | "Delete" | "0") {
            return if self.set(item, &id, &var.name, None, time) {
                Effect::Coded
            } else {
                Effect::None
            };
        }
        let digit = key.parse::<u8>().ok().filter(|d| (1..=9).contains(d));
        let value = match var.kind {
            Kind::One => digit.and_then(|d| {
                let keys = value_keys(&var);
                let k = keys.iter().position(|&x| x == Some(d))?;
                Some(CodeValue::Text(var.values[k].value.clone()))
            }),
            Kind::Several => digit.and_then(|d| {
                let keys = value_keys(&var);
                let k = keys.iter().position(|&x| x == Some(d))?;
                let mut chosen: Vec<usize> = match &now {
                    Some(CodeValue::Several(vs)) => {
                        vs.iter().filter_map(|t| var.value_index(t)).collect()
                    }
                    _ => vec![],
                };
                if let Some(at) = chosen.iter().position(|&c| c == k) {
                    chosen.remove(at);
                } else {
                    chosen.push(k);
                }
                chosen.sort_unstable();
                Some(CodeValue::Several(
                    chosen
                        .iter()
                        .map(|&c| var.values[c].value.clone())
                        .collect(),
                ))
            }),
            Kind::YesNo => match key {
                "1" | "y" => Some(CodeValue::YesNo(true)),
                "2" | "n" => Some(CodeValue::YesNo(false)),
                _ => None,
            },
            Kind::Number => {
                return if key.len() == 1 && (digit.is_some() || key == "-" || key == ".") {
                    Effect::Type(key.to_string())
                } else if key == "e" {
                    Effect::Type(String::new())
                } else {
                    Effect::None
                }
            }
            Kind::Note => {
                return if key == "e" || key == "n" {
                    Effect::Type(String::new())
                } else {
                    Effect::None
                }
            }
        };
        let Some(value) = value else {
            return Effect::None;
        };
        let advance = matches!(var.kind, Kind::One | Kind::YesNo);
        let changed = self.set(item, &id, &var.name, Some(value), time);
        if advance && vi + 1 < nv {
            self.walk.as_mut().unwrap().variable = vi + 1;
        }
        if changed {
            Effect::Coded
        } else {
            Effect::Moved
        }
    }

    /// The codes as the tables read them.
    pub fn coded(&self) -> Coded<'_> {
        Coded::new(&self.codes)
    }

    /// How many codes (of any coder) use `value` of `variable`.
    pub fn uses(&self, variable: &str, value: &str) -> usize {
        self.codes
            .iter()
            .filter(|c| c.variable == variable)
            .filter(|c| match &c.value {
                CodeValue::Text(t) => t == value,
                CodeValue::Several(vs) => vs.iter().any(|t| t == value),
                _ => false,
            })
            .count()
    }

    /// How many codes (of any coder) `variable` has.
    pub fn uses_variable(&self, variable: &str) -> usize {
        self.codes.iter().filter(|c| c.variable == variable).count()
    }

    /// Renames a value in the codebook and in every code that uses it.
    pub fn rename_value(&mut self, variable: &str, old: &str, new: &str) -> usize {
        if let Some(v) = self.book.variables.iter_mut().find(|v| v.name == variable) {
            for d in v.values.iter_mut().filter(|d| d.value == old) {
                d.value = new.to_string();
            }
        }
        let n = vitrine_corpus::coding::recode(&mut self.codes, variable, old, new);
        self.reindex();
        self.undo.clear();
        self.generation += 1;
        n
    }

    /// Renames a variable in the codebook and in every code of it.
    pub fn rename_variable(&mut self, old: &str, new: &str) -> usize {
        for v in self.book.variables.iter_mut().filter(|v| v.name == old) {
            v.name = new.to_string();
        }
        let mut n = 0;
        for c in self.codes.iter_mut().filter(|c| c.variable == old) {
            c.variable = new.to_string();
            n += 1;
        }
        self.reindex();
        self.undo.clear();
        self.generation += 1;
        n
    }

    /// Removes the codes of `variable` that use `value` (one choice), or takes `value` out of
    /// several-choice codes; with `value` None, every code of the variable. The page asks first.
    pub fn drop_codes(&mut self, variable: &str, value: Option<&str>) -> usize {
        let before = self.codes.len();
        let mut changed = 0;
        self.codes.retain_mut(|c| {
            if c.variable != variable {
                return true;
            }
            match (value, &mut c.value) {
                (None, _) => false,
                (Some(v), CodeValue::Text(t)) => t != v,
                (Some(v), CodeValue::Several(vs)) => {
                    let n = vs.len();
                    vs.retain(|t| t != v);
                    changed += usize::from(vs.len() != n);
                    true
                }
                _ => true,
            }
        });
        self.reindex();
        self.undo.clear();
        self.generation += 1;
        before - self.codes.len() + changed
    }

    /// Marks the codebook changed (after an edit that touches no code).
    pub fn touched(&mut self) {
        self.generation += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn book() -> Codebook {
        serde_json::from_str(
            r#"{"variables": [
                {"name": "framing", "kind": "one", "values": [
                    {"value": "full length"}, {"value": "half length"}, {"value": "head only", "key": 9}]},
                {"name": "motifs", "kind": "several", "values": [{"value": "tree"}, {"value": "river"}]},
                {"name": "signed", "kind": "yes-no"},
                {"name": "figures", "kind": "number"},
                {"name": "remarks", "kind": "note"}]}"#,
        )
        .unwrap()
    }

    fn ids(i: usize) -> String {
        format!("r{i}")
    }

    fn coding() -> Coding {
        let mut c = Coding {
            coder: "ana".into(),
            ..Default::default()
        };
        c.load(book(), vec![]);
        c
    }

    const T: &str = "2026-12-05T10:00:00Z";

    #[test]
    fn values_without_a_key_take_the_lowest_free_one() {
        let b = book();
        assert_eq!(value_keys(&b.variables[0]), vec![Some(1), Some(2), Some(9)]);
    }

    #[test]
    fn number_keys_code_and_move_on_and_undo_goes_back() {
        let mut c = coding();
        c.start(&[0, 1, 2], Order::Map, &ids, None);
        // 2: half length, and the view moves to the next variable.
        assert_eq!(c.key("2", false, T, &ids), Effect::Coded);
        assert_eq!(
            c.code("r0", "framing").unwrap().value,
            CodeValue::Text("half length".into())
        );
        assert_eq!(c.walk.as_ref().unwrap().variable, 1);
        // Several choices toggle and stay.
        c.key("1", false, T, &ids);
        c.key("2", false, T, &ids);
        c.key("1", false, T, &ids);
        assert_eq!(
            c.code("r0", "motifs").unwrap().value,
            CodeValue::Several(vec!["river".into()])
        );
        assert_eq!(c.walk.as_ref().unwrap().variable, 1);
        c.key("ArrowDown", false, T, &ids);
        assert_eq!(c.key("n", false, T, &ids), Effect::Coded);
        assert_eq!(
            c.code("r0", "signed").unwrap().value,
            CodeValue::YesNo(false)
        );
        // A digit on a number variable starts typing.
        assert_eq!(c.key("7", false, T, &ids), Effect::Type("7".into()));
        // A key no value has does nothing.
        c.key("ArrowUp", false, T, &ids);
        c.key("ArrowUp", false, T, &ids);
        c.key("ArrowUp", false, T, &ids);
        assert_eq!(c.walk.as_ref().unwrap().variable, 0);
        assert_eq!(c.key("5", false, T, &ids), Effect::None);
        // Next item; undo comes back to the first and restores its code.
        assert_eq!(c.key("Enter", false, T, &ids), Effect::Moved);
        assert_eq!(c.current(), Some(1));
        c.key("9", false, T, &ids);
        assert_eq!(
            c.code("r1", "framing").unwrap().value,
            CodeValue::Text("head only".into())
        );
        assert_eq!(c.key("z", true, T, &ids), Effect::Coded);
        assert!(c.code("r1", "framing").is_none());
        assert_eq!(c.key("z", true, T, &ids), Effect::Coded);
        assert_eq!(c.current(), Some(0));
        assert!(c.code("r0", "signed").is_none());
        // Backspace clears.
        c.walk.as_mut().unwrap().variable = 0;
        assert_eq!(c.key("Backspace", false, T, &ids), Effect::Coded);
        assert!(c.code("r0", "framing").is_none());
        let p = c.progress();
        assert_eq!(p[1], ("motifs".to_string(), 1, 3));
        assert_eq!(c.key("Escape", false, T, &ids), Effect::Close);
    }

    #[test]
    fn walks_come_in_the_orders_asked_for() {
        let mut c = coding();
        for v in ["framing", "motifs", "signed", "figures"] {
            let value = match v {
                "framing" => CodeValue::Text("full length".into()),
                "motifs" => CodeValue::Several(vec![]),
                "signed" => CodeValue::YesNo(true),
                _ => CodeValue::Number(2.0),
            };
            c.set(1, "r1", v, Some(value), T);
        }
        c.start(&[0, 1, 2, 3], Order::UncodedFirst, &ids, None);
        assert_eq!(c.walk.as_ref().unwrap().order, vec![0, 2, 3, 1]);
        let years = [1600, i32::MIN, 1500, 1550];
        c.start(&[0, 1, 2, 3], Order::Date, &ids, Some(&years));
        assert_eq!(c.walk.as_ref().unwrap().order, vec![2, 3, 0, 1]);
        c.start(&[0, 1, 2, 3, 4, 5, 6, 7], Order::Random(3), &ids, None);
        let a = c.walk.as_ref().unwrap().order.clone();
        c.start(&[0, 1, 2, 3, 4, 5, 6, 7], Order::Random(3), &ids, None);
        assert_eq!(c.walk.as_ref().unwrap().order, a);
        let mut sorted = a.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, (0..8).collect::<Vec<u32>>());
        assert_ne!(a, sorted);
        assert_eq!(c.finished_count(), 1);
        // Counts follow codes set and undone inside the walk.
        c.set(
            0,
            "r0",
            "framing",
            Some(CodeValue::Text("head only".into())),
            T,
        );
        assert_eq!(c.progress()[0].1, 2);
        c.undo();
        assert_eq!(c.progress()[0].1, 1);
        c.set(1, "r1", "signed", None, T);
        assert_eq!(c.finished_count(), 0);
        c.undo();
        assert_eq!(c.finished_count(), 1);
    }

    #[test]
    fn renaming_and_dropping_reach_every_code() {
        let mut c = coding();
        c.set(
            0,
            "r0",
            "framing",
            Some(CodeValue::Text("head only".into())),
            T,
        );
        c.set(
            0,
            "r0",
            "motifs",
            Some(CodeValue::Several(vec!["tree".into(), "river".into()])),
            T,
        );
        c.coder = "ben".into();
        c.set(
            0,
            "r0",
            "framing",
            Some(CodeValue::Text("head only".into())),
            T,
        );
        assert_eq!(c.uses("framing", "head only"), 2);
        assert_eq!(c.rename_value("framing", "head only", "head"), 2);
        assert_eq!(c.book.variables[0].values[2].value, "head");
        assert_eq!(
            c.code("r0", "framing").unwrap().value,
            CodeValue::Text("head".into())
        );
        assert_eq!(c.drop_codes("motifs", Some("river")), 1);
        c.coder = "ana".into();
        assert_eq!(
            c.code("r0", "motifs").unwrap().value,
            CodeValue::Several(vec!["tree".into()])
        );
        assert_eq!(c.rename_variable("framing", "pose"), 2);
        assert!(c.code("r0", "pose").is_some());
        assert_eq!(c.drop_codes("pose", None), 2);
        assert_eq!(c.codes.len(), 1);
    }
}
