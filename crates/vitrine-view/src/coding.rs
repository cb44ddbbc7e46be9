//! The viewer's coding: the codebook and every code in the browser, the walk through the corpus in
//! the coding view, its keys, and undo. Platform-free: the page draws what this decides and stores
//! what it changes.

use std::collections::HashMap;

use vitrine_corpus::coding::{
    disagreements, merge_coding, time_order, Cleared, Code, CodeValue, Codebook, Coded, Kind,
    MergeReport, Variable,
};

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
    /// Only the items on which coders disagree, the unsettled first (in map order): the walk
    /// that settles them. A value set in it is the settled value, kept beside the coders' own.
    Disagreements,
}

impl Order {
    pub fn name(self) -> String {
        match self {
            Order::UncodedFirst => "uncoded first".into(),
            Order::Map => "map".into(),
            Order::Date => "date".into(),
            Order::Random(s) => format!("random (seed {s})"),
            Order::Disagreements => "disagreements".into(),
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
    /// The corpus the walk was started over (atlas order): a walk over its disagreements holds
    /// fewer items, and another order starts from all of them again.
    pub source: Vec<u32>,
    /// Whether an item (by index) is in the corpus.
    member: Vec<bool>,
    /// When settling: each item's variables (indices) on which its coders disagree.
    disputed: HashMap<String, Vec<usize>>,
    /// Per variable, how many items of the walk count: every item, or when settling those
    /// disputed on it.
    totals: Vec<usize>,
    /// Items of the walk this coder coded (settled, when settling), per variable; items with every
    /// variable done. Kept up to date code by code, so that a step costs the same for a corpus of
    /// any size.
    coded: Vec<usize>,
    finished: usize,
}

/// One change, to undo.
#[derive(Debug, Clone, PartialEq)]
struct Change {
    index: usize,
    /// Whose code it was (undo puts back that coder's code, whoever codes now).
    coder: String,
    settled: bool,
    item: String,
    variable: String,
    before: Option<Code>,
    /// When its key was cleared before the change, if it was.
    before_cleared: Option<String>,
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

pub use vitrine_corpus::coding::CodeKey;

/// What changed since the page last stored the codes.
#[derive(Debug, Clone, PartialEq, Default)]
pub enum Dirty {
    /// Nothing.
    #[default]
    Clean,
    /// These codes (each now set, or gone).
    Codes(Vec<CodeKey>),
    /// Too much to say code by code (a file added, values renamed): store everything.
    All,
}

/// The codebook, the codes, the coder and the walk.
#[derive(Debug, Default)]
pub struct Coding {
    pub book: Codebook,
    pub codes: Vec<Code>,
    /// Each item's codes (indices into `codes`): a lookup allocates nothing and scans a few.
    by_item: HashMap<String, Vec<usize>>,
    /// Codes taken back, and when: a file merged later that still holds one does not bring it back.
    cleared: HashMap<CodeKey, String>,
    /// Whose codes the view sets (change it with [`Coding::set_coder`]).
    pub coder: String,
    pub walk: Option<Walk>,
    /// Steps to undo, each one or more changes (codes set on many items at once are one step).
    undo: Vec<Vec<Change>>,
    /// Changes with every change of the codebook or codes.
    pub generation: u64,
    /// What the page has not stored yet.
    pub dirty: Dirty,
    /// See [`Coding::take_stale`].
    stale: bool,
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

/// `items` in atlas order, each once.
fn sorted(items: &[u32]) -> Vec<u32> {
    let mut v = items.to_vec();
    if !v.is_sorted() {
        v.sort_unstable();
    }
    v.dedup();
    v
}

fn splitmix(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl Coding {
    /// Replaces the codebook, codes and clearings (an opened corpus file, or what the browser
    /// kept).
    pub fn load(&mut self, book: Codebook, codes: Vec<Code>, cleared: Vec<Cleared>) {
        self.book = book;
        self.codes = codes;
        let mut cleared = cleared;
        vitrine_corpus::coding::apply_clearings(&mut self.codes, &mut cleared);
        self.cleared = cleared
            .into_iter()
            .map(|c| (c.owned_key(), c.time))
            .collect();
        self.reindex();
        self.undo.clear();
        self.changed_all();
    }

    /// After a change of many codes or of the codebook: everything is stored again, undo
    /// starts afresh, and the walk's counts are to be made anew ([`Coding::recount`]).
    fn changed_all(&mut self) {
        self.generation += 1;
        self.dirty = Dirty::All;
    }

    fn reindex(&mut self) {
        self.by_item.clear();
        for (i, c) in self.codes.iter().enumerate() {
            self.by_item.entry(c.item.clone()).or_default().push(i);
        }
    }

    fn find(&self, item: &str, variable: &str, coder: &str, settled: bool) -> Option<usize> {
        self.by_item.get(item)?.iter().copied().find(|&i| {
            let c = &self.codes[i];
            c.variable == variable && c.coder == coder && c.settled == settled
        })
    }

    /// Merges another file's codebook-checked codes and clearings into these: see
    /// [`merge_coding`]. Everything is stored again; undo starts afresh.
    pub fn merge(&mut self, book: Codebook, codes: &[Code], cleared: &[Cleared]) -> MergeReport {
        let mut mine = std::mem::take(&mut self.codes);
        let mut gone = self.clearings();
        let r = merge_coding(&mut mine, &mut gone, codes, cleared);
        self.load(book, mine, gone);
        r
    }

    /// The codes taken back and when, in key order (for the corpus file).
    pub fn clearings(&self) -> Vec<Cleared> {
        let mut v: Vec<Cleared> = self
            .cleared
            .iter()
            .map(|(k, t)| Cleared::of(k, t))
            .collect();
        v.sort_by_key(Cleared::owned_key);
        v
    }

    /// When the code under `key` was cleared, if it is.
    pub fn cleared_at(&self, key: &CodeKey) -> Option<&str> {
        self.cleared.get(key).map(String::as_str)
    }

    /// The code under `key`, if any.
    pub fn get(&self, key: &CodeKey) -> Option<&Code> {
        self.find(&key.0, &key.1, &key.2, key.3)
            .map(|i| &self.codes[i])
    }

    /// The code the view shows and sets: this coder's code of `item` for `variable`, or when
    /// settling, its settled value (the latest, whoever settled it).
    pub fn code(&self, item: &str, variable: &str) -> Option<&Code> {
        if self.settling() {
            return self.settled_code(item, variable);
        }
        self.find(item, variable, &self.coder, false)
            .map(|i| &self.codes[i])
    }

    /// The latest settled code of `item` for `variable`, whoever settled it.
    pub fn settled_code(&self, item: &str, variable: &str) -> Option<&Code> {
        self.by_item
            .get(item)?
            .iter()
            .map(|&i| &self.codes[i])
            .filter(|c| c.settled && c.variable == variable)
            .max_by(|a, b| (time_order(&a.time), &a.coder).cmp(&(time_order(&b.time), &b.coder)))
    }

    /// Every coder's own code of `item` for `variable` (settled values aside), by coder's name.
    pub fn coders_codes(&self, item: &str, variable: &str) -> Vec<&Code> {
        let mut v: Vec<&Code> = self.by_item.get(item).map_or(vec![], |l| {
            l.iter()
                .map(|&i| &self.codes[i])
                .filter(|c| !c.settled && c.variable == variable)
                .collect()
        });
        v.sort_by(|a, b| a.coder.cmp(&b.coder));
        v
    }

    /// Whether the walk settles disagreements (its codes are settled values).
    pub fn settling(&self) -> bool {
        self.walk
            .as_ref()
            .is_some_and(|w| w.how == Order::Disagreements)
    }

    /// Whether the coders disagree on variable `v` (index) of `item` (known while settling).
    pub fn disputed(&self, item: &str, v: usize) -> bool {
        self.walk
            .as_ref()
            .is_some_and(|w| w.disputed.get(item).is_some_and(|d| d.contains(&v)))
    }

    /// The variables the view steps through on the item it stands on: all of them, or when
    /// settling, those its coders disagree on.
    pub fn variables_here(&self, ids: &dyn Fn(usize) -> String) -> Vec<usize> {
        let all = || (0..self.book.variables.len()).collect();
        let Some(w) = &self.walk else { return all() };
        if w.how != Order::Disagreements {
            return all();
        }
        let Some(item) = self.current() else {
            return all();
        };
        match w.disputed.get(&ids(item)) {
            Some(d) if !d.is_empty() => d.clone(),
            _ => all(),
        }
    }

    /// Another coder codes from now: undo starts afresh (it holds the other coder's steps) and
    /// the walk counts this coder's codes.
    pub fn set_coder(&mut self, name: &str, ids: &dyn Fn(usize) -> String) {
        if self.coder != name {
            self.coder = name.to_string();
            self.undo.clear();
            self.recount(ids);
            self.generation += 1;
            if self.dirty == Dirty::Clean {
                self.dirty = Dirty::Codes(vec![]);
            }
        }
    }

    /// Sets (or with None clears) the code the view sets — this coder's, or when settling the
    /// settled value — of item `index` (id `item`) for `variable`, at `time`; kept for undo.
    /// Returns whether anything changed.
    pub fn set(
        &mut self,
        index: usize,
        item: &str,
        variable: &str,
        value: Option<CodeValue>,
        time: &str,
    ) -> bool {
        if !self.settling() {
            return self.set_own(index, item, variable, value, time);
        }
        // Settling works on the value shown, whoever settled it: the same value again changes
        // nothing; another (or this settler's own earlier one) becomes the latest; clearing
        // clears every settled value of the item's variable, in one step.
        let shown = self.settled_code(item, variable).map(|c| c.value.clone());
        if shown == value {
            return false;
        }
        let group: Vec<Change> = match value {
            Some(v) => {
                let key = self.key_of(item, variable, true);
                self.change(index, key, Some(v), time, true)
                    .into_iter()
                    .collect()
            }
            None => {
                let keys: Vec<CodeKey> = self.by_item.get(item).map_or(vec![], |l| {
                    l.iter()
                        .map(|&i| &self.codes[i])
                        .filter(|c| c.settled && c.variable == variable)
                        .map(Code::owned_key)
                        .collect()
                });
                keys.into_iter()
                    .filter_map(|k| self.change(index, k, None, time, false))
                    .collect()
            }
        };
        let changed = !group.is_empty();
        if changed {
            self.undo.push(group);
        }
        changed
    }

    /// This coder's key for `item` and `variable`, settled or not.
    fn key_of(&self, item: &str, variable: &str, settled: bool) -> CodeKey {
        (
            item.to_string(),
            variable.to_string(),
            self.coder.clone(),
            settled,
        )
    }

    /// This coder's own code (never a settled value, whatever the walk) of item `index`, as the
    /// record card sets it. Returns whether anything changed.
    pub fn set_own(
        &mut self,
        index: usize,
        item: &str,
        variable: &str,
        value: Option<CodeValue>,
        time: &str,
    ) -> bool {
        let key = self.key_of(item, variable, false);
        let ch = self.change(index, key, value, time, false);
        ch.map(|c| self.undo.push(vec![c])).is_some()
    }

    /// This coder's own code of `item` for `variable`, whatever the walk.
    pub fn own_code(&self, item: &str, variable: &str) -> Option<&Code> {
        self.find(item, variable, &self.coder, false)
            .map(|i| &self.codes[i])
    }

    /// Codes many items at once (this coder's own codes): each item's code becomes what `to` makes
    /// of its present value (None clears it). One step for undo. Returns how many changed.
    pub fn set_many(
        &mut self,
        items: &[(usize, String)],
        variable: &str,
        to: &dyn Fn(Option<&CodeValue>) -> Option<CodeValue>,
        time: &str,
    ) -> usize {
        let mut group = Vec::new();
        for (index, id) in items {
            let value = to(self.own_code(id, variable).map(|c| &c.value));
            let key = self.key_of(id, variable, false);
            if let Some(c) = self.change(*index, key, value, time, false) {
                group.push(c);
            }
        }
        let n = group.len();
        if n > 0 {
            self.undo.push(group);
        }
        n
    }

    /// Sets (None: clears) the code under `key` at `time`, returning the change to undo; with
    /// `renew` a code of the same value is set again (its time becomes `time`).
    fn change(
        &mut self,
        index: usize,
        key: CodeKey,
        value: Option<CodeValue>,
        time: &str,
        renew: bool,
    ) -> Option<Change> {
        let before = self.get(&key).cloned();
        let same = before.as_ref().map(|c| &c.value) == value.as_ref();
        if same && !(renew && value.is_some()) {
            return None;
        }
        let (pos, var_index) = self.walk.as_ref().map_or((0, 0), |w| (w.pos, w.variable));
        let before_cleared = match &value {
            None => self.cleared.insert(key.clone(), time.to_string()),
            Some(_) => self.cleared.remove(&key),
        };
        let ch = Change {
            index,
            coder: key.2.clone(),
            settled: key.3,
            item: key.0.clone(),
            variable: key.1.clone(),
            before,
            before_cleared,
            pos,
            var_index,
        };
        let code = value.map(|v| Code {
            item: key.0.clone(),
            variable: key.1.clone(),
            value: v,
            coder: key.2.clone(),
            time: time.into(),
            settled: key.3,
        });
        self.put_counted(index, key, code);
        Some(ch)
    }

    /// [`Coding::put`], keeping the walk's counts (of this coder's codes, or of settled values
    /// when settling).
    fn put_counted(&mut self, index: usize, key: CodeKey, code: Option<Code>) {
        if !key.3 && self.settling() {
            self.stale = true;
        }
        let var = self.book.variables.iter().position(|v| v.name == key.1);
        let counts = key.3 == self.settling()
            && (key.3 || key.2 == self.coder)
            && var.is_some_and(|v| self.counts(index, &key.0, v));
        let (id, name) = (key.0.clone(), key.1.clone());
        let was = counts && self.code(&id, &name).is_some();
        let was_finished = counts && self.finished(&id);
        self.put(key, code);
        if counts {
            let now = self.code(&id, &name).is_some();
            let finished = self.finished(&id);
            let w = self.walk.as_mut().unwrap();
            if let Some(c) = var.and_then(|v| w.coded.get_mut(v)) {
                match (was, now) {
                    (false, true) => *c += 1,
                    (true, false) => *c = c.saturating_sub(1),
                    _ => {}
                }
            }
            match (was_finished, finished) {
                (false, true) => w.finished += 1,
                (true, false) => w.finished = w.finished.saturating_sub(1),
                _ => {}
            }
        }
    }

    /// Whether variable `v` of item `index` (id `id`) counts in the walk's progress.
    fn counts(&self, index: usize, id: &str, v: usize) -> bool {
        match &self.walk {
            None => false,
            Some(w) if w.how == Order::Disagreements => {
                w.disputed.get(id).is_some_and(|d| d.contains(&v))
            }
            Some(w) => w.member.get(index).copied().unwrap_or(false),
        }
    }

    /// Sets or removes the code under `key`: one code's work, whatever the number of codes.
    fn put(&mut self, key: CodeKey, code: Option<Code>) {
        match (self.find(&key.0, &key.1, &key.2, key.3), code) {
            (Some(i), Some(c)) => self.codes[i] = c,
            (None, Some(c)) => {
                self.by_item
                    .entry(c.item.clone())
                    .or_default()
                    .push(self.codes.len());
                self.codes.push(c);
            }
            (Some(i), None) => {
                let last = self.codes.len() - 1;
                let gone = self.codes.swap_remove(i);
                if let Some(list) = self.by_item.get_mut(&gone.item) {
                    list.retain(|&j| j != i);
                    if list.is_empty() {
                        self.by_item.remove(&gone.item);
                    }
                }
                // The last code moved into place i.
                if i != last {
                    let moved = self.codes[i].item.clone();
                    if let Some(list) = self.by_item.get_mut(&moved) {
                        for j in list.iter_mut().filter(|j| **j == last) {
                            *j = i;
                        }
                    }
                }
            }
            (None, None) => return,
        }
        self.generation += 1;
        match &mut self.dirty {
            Dirty::All => {}
            Dirty::Codes(keys) => keys.push(key),
            Dirty::Clean => self.dirty = Dirty::Codes(vec![key]),
        }
    }

    /// Undoes the last step; the walk goes back to where it was made. False when there is none.
    pub fn undo(&mut self) -> bool {
        let Some(group) = self.undo.pop() else {
            return false;
        };
        let mut at = None;
        for ch in group.into_iter().rev() {
            at = Some((ch.index, ch.pos, ch.var_index));
            let key = (ch.item, ch.variable, ch.coder, ch.settled);
            match ch.before_cleared {
                Some(t) => self.cleared.insert(key.clone(), t),
                None => self.cleared.remove(&key),
            };
            self.put_counted(ch.index, key, ch.before);
        }
        // The walk goes back to the item, when the item is in it (a code set in the record
        // card, or under another walk, leaves the walk where it is).
        if let (Some(w), Some((index, pos, var))) = (&mut self.walk, at) {
            let here = if w.order.get(pos) == Some(&(index as u32)) {
                Some(pos)
            } else {
                w.order.iter().position(|&i| i as usize == index)
            };
            if let Some(p) = here {
                w.pos = p;
                w.variable = var.min(self.book.variables.len().saturating_sub(1));
            }
        }
        true
    }

    /// Whether a coder's own code changed while a settling walk stands (what the coders disagree
    /// on may have changed: [`Coding::recount`] finds it anew). Reading clears it.
    pub fn take_stale(&mut self) -> bool {
        std::mem::take(&mut self.stale)
    }

    /// Whether there is a step to undo.
    pub fn can_undo(&self) -> bool {
        !self.undo.is_empty()
    }

    /// Whether this coder has coded every variable (notes aside) of `item`; when settling,
    /// whether every variable its coders disagree on is settled.
    pub fn finished(&self, item: &str) -> bool {
        if let Some(w) = self.walk.as_ref().filter(|w| w.how == Order::Disagreements) {
            return w.disputed.get(item).is_some_and(|d| {
                d.iter()
                    .all(|&v| self.code(item, &self.book.variables[v].name).is_some())
            });
        }
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
        let mut member = vec![false; items.iter().map(|&i| i as usize + 1).max().unwrap_or(0)];
        for &i in items {
            member[i as usize] = true;
        }
        self.walk = Some(Walk {
            order: items.to_vec(),
            pos: 0,
            variable: 0,
            how,
            source: sorted(items),
            member,
            disputed: HashMap::new(),
            totals: vec![],
            coded: vec![],
            finished: 0,
        });
        // Counted first: the orders that put unfinished items first read the counts.
        self.recount(ids);
        let mut order = items.to_vec();
        match how {
            Order::Map => {}
            Order::UncodedFirst => {
                order.sort_by_cached_key(|&i| self.finished(&ids(i as usize)));
            }
            Order::Disagreements => {
                let w = self.walk.as_ref().unwrap();
                order.retain(|&i| w.disputed.contains_key(&ids(i as usize)));
                order.sort_by_cached_key(|&i| self.finished(&ids(i as usize)));
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
        self.walk.as_mut().unwrap().order = order;
        self.walk.as_mut().unwrap().variable =
            self.variables_here(ids).first().copied().unwrap_or(0);
    }

    /// Whether the walk is over exactly `items` (atlas order) in `how`'s kind (coding or
    /// settling).
    pub fn walks(&self, items: &[u32], settle: bool) -> bool {
        self.walk
            .as_ref()
            .is_some_and(|w| (w.how == Order::Disagreements) == settle && w.source == sorted(items))
    }

    /// Counts the walk's coded (settled) and finished items anew, after a change of many codes;
    /// when settling, finds anew what the coders disagree on.
    pub fn recount(&mut self, ids: &dyn Fn(usize) -> String) {
        self.stale = false;
        let Some(w) = &self.walk else { return };
        let nv = self.book.variables.len();
        let source: Vec<String> = w.source.iter().map(|&i| ids(i as usize)).collect();
        let (disputed, totals) = if w.how == Order::Disagreements {
            let coded = Coded::new(&self.codes);
            let refs: Vec<&str> = source.iter().map(String::as_str).collect();
            let mut disputed: HashMap<String, Vec<usize>> = HashMap::new();
            let mut totals = vec![0; nv];
            for d in disagreements(&self.book, &coded, &refs) {
                if let Some(v) = self
                    .book
                    .variables
                    .iter()
                    .position(|v| v.name == d.variable)
                {
                    disputed.entry(d.item).or_default().push(v);
                    totals[v] += 1;
                }
            }
            for d in disputed.values_mut() {
                d.sort_unstable();
            }
            (disputed, totals)
        } else {
            (HashMap::new(), vec![source.len(); nv])
        };
        let settling = w.how == Order::Disagreements;
        let current = self.current();
        let w = self.walk.as_mut().unwrap();
        if settling {
            // The walk keeps its order for the items still disputed, stands on the same item
            // when it still is, and takes newly disputed items at its end.
            let mut order: Vec<u32> = w
                .order
                .iter()
                .copied()
                .filter(|&i| {
                    let k = w.source.binary_search(&i).ok();
                    k.is_some_and(|k| disputed.contains_key(&source[k]))
                })
                .collect();
            let had: std::collections::HashSet<u32> = order.iter().copied().collect();
            order.extend(
                w.source
                    .iter()
                    .zip(&source)
                    .filter(|(i, id)| !had.contains(i) && disputed.contains_key(*id))
                    .map(|(&i, _)| i),
            );
            w.pos = current
                .and_then(|c| order.iter().position(|&i| i as usize == c))
                .unwrap_or(w.pos)
                .min(order.len().saturating_sub(1));
            w.order = order;
        }
        w.disputed = disputed;
        let w = self.walk.as_ref().unwrap();
        let mut coded = vec![0; nv];
        let mut finished = 0;
        for (&i, id) in w.source.iter().zip(&source) {
            let mut any = false;
            for (k, v) in self.book.variables.iter().enumerate() {
                if self.counts(i as usize, id, k) {
                    any = true;
                    if self.code(id, &v.name).is_some() {
                        coded[k] += 1;
                    }
                }
            }
            finished += usize::from(any && self.finished(id));
        }
        let w = self.walk.as_mut().unwrap();
        w.coded = coded;
        w.totals = totals;
        w.finished = finished;
        w.variable = w.variable.min(nv.saturating_sub(1));
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
            .zip(w.coded.iter().zip(&w.totals))
            .map(|(v, (&n, &total))| (v.name.clone(), n, total))
            .collect()
    }

    /// Items of the walk every variable of which (notes aside) this coder has coded.
    pub fn finished_count(&self) -> usize {
        self.walk.as_ref().map_or(0, |w| w.finished)
    }

    fn step(&mut self, by: isize, ids: &dyn Fn(usize) -> String) -> Effect {
        let Some(w) = &mut self.walk else {
            return Effect::None;
        };
        let to = (w.pos as isize + by).clamp(0, w.order.len().saturating_sub(1) as isize) as usize;
        if to == w.pos {
            return Effect::None;
        }
        w.pos = to;
        let first = self.variables_here(ids).first().copied().unwrap_or(0);
        self.walk.as_mut().unwrap().variable = first;
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
        let (pos, len) = (w.pos as isize, w.order.len() as isize);
        // The variables stepped through: all, or when settling those disputed here.
        let here = self.variables_here(ids);
        let at = here.iter().position(|&v| v == vi);
        match key {
            "ArrowRight" | "Enter" | "j" | "PageDown" => return self.step(1, ids),
            "ArrowLeft" | "k" | "PageUp" => return self.step(-1, ids),
            "Home" => return self.step(-pos, ids),
            "End" => return self.step(len, ids),
            "Escape" => return Effect::Close,
            "ArrowDown" | "Tab" | "ArrowUp" => {
                if !here.is_empty() {
                    let n = here.len();
                    let next = match (at, key) {
                        (Some(a), "ArrowUp") => (a + n - 1) % n,
                        (Some(a), _) => (a + 1) % n,
                        (None, _) => 0,
                    };
                    self.walk.as_mut().unwrap().variable = here[next];
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
        if var.kind == Kind::Number && key == "0" {
            return Effect::Type("0".into());
        }
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
        if let Some(&next) = here.iter().find(|&&v| v > vi).filter(|_| advance) {
            self.walk.as_mut().unwrap().variable = next;
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
        self.changed_all();
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
        self.cleared = std::mem::take(&mut self.cleared)
            .into_iter()
            .map(|(mut k, t)| {
                if k.1 == old {
                    k.1 = new.to_string();
                }
                (k, t)
            })
            .collect();
        self.reindex();
        self.undo.clear();
        self.changed_all();
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
                    // A code whose only value went is no longer "none of these": it goes (and
                    // the item is to be coded again).
                    let emptied = n > 0 && vs.is_empty();
                    changed += usize::from(!emptied && vs.len() != n);
                    !emptied
                }
                _ => true,
            }
        });
        if value.is_none() {
            // The variable goes: its clearings with it.
            self.cleared.retain(|k, _| k.1 != variable);
        }
        self.reindex();
        self.undo.clear();
        self.changed_all();
        before - self.codes.len() + changed
    }

    /// Marks the codebook changed (after an edit that touches no code).
    pub fn touched(&mut self) {
        self.generation += 1;
        if self.dirty == Dirty::Clean {
            self.dirty = Dirty::Codes(vec![]);
        }
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
        c.load(book(), vec![], vec![]);
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
    fn undo_keeps_to_its_coder_and_removals_keep_the_index_whole() {
        let mut c = coding();
        // What loading gave is stored (everything); from here each code is told.
        assert_eq!(std::mem::take(&mut c.dirty), Dirty::All);
        c.start(&[0, 1, 2], Order::Map, &ids, None);
        for (i, v) in ["full length", "half length", "head only"]
            .iter()
            .enumerate()
        {
            c.set(
                i,
                &ids(i),
                "framing",
                Some(CodeValue::Text(v.to_string())),
                T,
            );
        }
        assert_eq!(c.progress()[0].1, 3);
        // Another coder takes over: undo starts afresh, the counts are hers.
        c.set_coder("ben", &ids);
        assert!(!c.undo());
        assert_eq!(c.progress()[0].1, 0);
        c.set(
            1,
            "r1",
            "framing",
            Some(CodeValue::Text("full length".into())),
            T,
        );
        c.set_coder("ana", &ids);
        // Clearing ana's first code moves the last code into its place: every lookup still finds
        // its own code.
        c.set(0, "r0", "framing", None, T);
        assert!(c.code("r0", "framing").is_none());
        assert_eq!(
            c.code("r1", "framing").unwrap().value,
            CodeValue::Text("half length".into())
        );
        assert_eq!(
            c.code("r2", "framing").unwrap().value,
            CodeValue::Text("head only".into())
        );
        assert_eq!(
            c.get(&("r1".into(), "framing".into(), "ben".into(), false))
                .unwrap()
                .value,
            CodeValue::Text("full length".into())
        );
        assert_eq!(c.progress()[0].1, 2);
        // The store hears of each code changed, and of everything after a rename.
        let Dirty::Codes(keys) = std::mem::take(&mut c.dirty) else {
            panic!("{:?}", c.dirty)
        };
        assert_eq!(
            keys.last().unwrap(),
            &(
                "r0".to_string(),
                "framing".to_string(),
                "ana".to_string(),
                false
            )
        );
        c.rename_value("framing", "head only", "head");
        assert_eq!(c.dirty, Dirty::All);
        // A digit 0 on a number variable is typed, not a clearing.
        c.walk.as_mut().unwrap().variable = 3;
        assert_eq!(c.key("0", false, T, &ids), Effect::Type("0".into()));
    }

    #[test]
    fn a_several_choice_code_whose_only_value_goes_is_dropped() {
        let mut c = coding();
        c.set(
            0,
            "r0",
            "motifs",
            Some(CodeValue::Several(vec!["river".into()])),
            T,
        );
        c.set(1, "r1", "motifs", Some(CodeValue::Several(vec![])), T);
        assert_eq!(c.drop_codes("motifs", Some("river")), 1);
        assert!(c.code("r0", "motifs").is_none());
        assert_eq!(
            c.code("r1", "motifs").unwrap().value,
            CodeValue::Several(vec![])
        );
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

    #[test]
    fn the_settling_walk_visits_disagreements_only_and_sets_settled_values() {
        let mut c = coding();
        let t = |s: &str| Some(CodeValue::Text(s.into()));
        // ana and ben code four items; they disagree on r1's framing, on r2's framing and
        // signed; r0 they code alike; r3 only ana coded.
        for (coder, codes) in [
            (
                "ana",
                [
                    ("r0", "full length"),
                    ("r1", "half length"),
                    ("r2", "head only"),
                ],
            ),
            (
                "ben",
                [
                    ("r0", "full length"),
                    ("r1", "head only"),
                    ("r2", "half length"),
                ],
            ),
        ] {
            c.coder = coder.into();
            for (i, (item, v)) in codes.iter().enumerate() {
                c.set(i, item, "framing", t(v), T);
            }
            c.set(2, "r2", "signed", Some(CodeValue::YesNo(coder == "ana")), T);
        }
        c.coder = "ana".into();
        c.set(3, "r3", "framing", t("head only"), T);
        c.coder = "cy".into();
        c.start(&[0, 1, 2, 3], Order::Disagreements, &ids, None);
        assert!(c.settling());
        assert_eq!(c.walk.as_ref().unwrap().order, vec![1, 2]);
        assert_eq!(c.progress()[0], ("framing".to_string(), 0, 2));
        assert_eq!(c.progress()[2], ("signed".to_string(), 0, 1));
        assert_eq!(
            c.coders_codes("r1", "framing")
                .iter()
                .map(|c| c.coder.as_str())
                .collect::<Vec<_>>(),
            ["ana", "ben"]
        );
        // 9 settles r1's framing as head only: a settled code beside the coders' own.
        assert_eq!(c.key("9", false, T, &ids), Effect::Coded);
        let s = c.settled_code("r1", "framing").unwrap();
        assert!(s.settled && s.coder == "cy" && s.value == CodeValue::Text("head only".into()));
        assert_eq!(c.codes.iter().filter(|c| c.item == "r1").count(), 3);
        assert_eq!(c.finished_count(), 1);
        // On r2 the view steps through the two disputed variables only.
        c.key("Enter", false, T, &ids);
        assert_eq!(c.current(), Some(2));
        assert_eq!(c.walk.as_ref().unwrap().variable, 0);
        c.key("1", false, T, &ids);
        assert_eq!(c.walk.as_ref().unwrap().variable, 2, "on to signed");
        c.key("ArrowDown", false, T, &ids);
        assert_eq!(c.walk.as_ref().unwrap().variable, 0, "back to framing");
        c.key("ArrowUp", false, T, &ids);
        c.key("y", false, T, &ids);
        assert_eq!(c.finished_count(), 2);
        assert_eq!(c.progress()[0].1, 2);
        // The tables read the settled values.
        let coded = c.coded();
        assert_eq!(
            coded.outcome("framing", "r2"),
            vitrine_corpus::coding::Outcome::Settled(CodeValue::Text("full length".into()))
        );
        // Undo takes the settled value back, not a coder's code.
        c.key("z", true, T, &ids);
        assert!(c.settled_code("r2", "signed").is_none());
        assert_eq!(c.finished_count(), 1);
        // A new walk puts the unsettled first; the coding walk over the same corpus is another.
        c.start(&[0, 1, 2, 3], Order::Disagreements, &ids, None);
        assert_eq!(c.walk.as_ref().unwrap().order, vec![2, 1]);
        assert!(c.walks(&[0, 1, 2, 3], true) && !c.walks(&[0, 1, 2, 3], false));
        c.start(&[0, 1, 2, 3], Order::Map, &ids, None);
        assert!(!c.settling());
        assert!(
            c.code("r1", "framing").is_none(),
            "cy coded nothing herself"
        );
    }

    #[test]
    fn many_items_coded_at_once_are_one_step_and_never_settled_values() {
        let mut c = coding();
        let items: Vec<(usize, String)> = (0..5).map(|i| (i, ids(i))).collect();
        c.set(1, "r1", "signed", Some(CodeValue::YesNo(false)), T);
        c.start(&[0, 1, 2, 3, 4], Order::Disagreements, &ids, None);
        // Even with a settling walk standing, codes set on many items are the coder's own.
        let yes = |_: Option<&CodeValue>| Some(CodeValue::YesNo(true));
        assert_eq!(c.set_many(&items, "signed", &yes, T), 5);
        assert!(c.codes.iter().all(|c| !c.settled && c.coder == "ana"));
        assert_eq!(
            c.set_many(&items, "signed", &yes, T),
            0,
            "nothing left to change"
        );
        // Several choices: a value added to each item's own set.
        c.set_own(
            2,
            "r2",
            "motifs",
            Some(CodeValue::Several(vec!["river".into()])),
            T,
        );
        let add_tree = |now: Option<&CodeValue>| {
            let mut v = match now {
                Some(CodeValue::Several(v)) => v.clone(),
                _ => vec![],
            };
            if !v.iter().any(|t| t == "tree") {
                v.insert(0, "tree".into());
            }
            Some(CodeValue::Several(v))
        };
        assert_eq!(c.set_many(&items[1..3], "motifs", &add_tree, T), 2);
        assert_eq!(
            c.own_code("r2", "motifs").unwrap().value,
            CodeValue::Several(vec!["tree".into(), "river".into()])
        );
        // One undo takes the whole step back, and the next the one before it.
        assert!(c.undo());
        assert_eq!(
            c.own_code("r2", "motifs").unwrap().value,
            CodeValue::Several(vec!["river".into()])
        );
        assert!(c.own_code("r1", "motifs").is_none());
        assert!(c.undo());
        assert!(c.undo());
        assert_eq!(
            c.own_code("r1", "signed").unwrap().value,
            CodeValue::YesNo(false),
            "r1 had its own code before"
        );
        assert!(c.own_code("r0", "signed").is_none());
        assert!(c.undo());
        assert!(!c.can_undo());
        assert!(c.codes.is_empty());
    }

    #[test]
    fn a_code_cleared_here_stays_cleared_when_an_older_file_is_merged() {
        let mut c = coding();
        let half = Some(CodeValue::Text("half length".into()));
        c.set(0, "r0", "framing", half.clone(), "2026-12-01T10:00:00Z");
        c.set(1, "r1", "framing", half.clone(), "2026-12-01T10:00:00Z");
        // What a file written then holds.
        let older = c.codes.clone();
        c.set(0, "r0", "framing", None, "2026-12-02T10:00:00Z");
        let key = (
            "r0".to_string(),
            "framing".to_string(),
            "ana".to_string(),
            false,
        );
        assert_eq!(c.cleared_at(&key), Some("2026-12-02T10:00:00Z"));
        let r = c.merge(book(), &older, &[]);
        assert_eq!(r.cleared_later, 1);
        assert!(
            c.code("r0", "framing").is_none(),
            "the cleared code came back"
        );
        assert!(c.code("r1", "framing").is_some());
        assert_eq!(c.clearings().len(), 1);
        // Coding it again takes the clearing away; undo brings the clearing back.
        c.set(0, "r0", "framing", half.clone(), "2026-12-03T10:00:00Z");
        assert!(c.clearings().is_empty());
        c.undo();
        assert_eq!(c.cleared_at(&key), Some("2026-12-02T10:00:00Z"));
        // Undoing a clearing takes it away with the code back.
        c.set(1, "r1", "framing", None, "2026-12-03T10:00:00Z");
        c.undo();
        assert!(c.code("r1", "framing").is_some());
        assert_eq!(c.clearings().len(), 1);
        // A renamed variable keeps its clearings.
        c.rename_variable("framing", "pose");
        assert_eq!(c.clearings()[0].variable, "pose");
    }

    #[test]
    fn settling_works_on_the_value_shown_and_the_walk_follows_new_disagreements() {
        let mut c = coding();
        let t = |s: &str| Some(CodeValue::Text(s.into()));
        for (coder, v0, v1) in [
            ("ana", "full length", "half length"),
            ("ben", "head only", "half length"),
        ] {
            c.coder = coder.into();
            c.set(0, "r0", "framing", t(v0), T);
            c.set(1, "r1", "framing", t(v1), T);
        }
        c.coder = "cy".into();
        c.start(&[0, 1, 2], Order::Disagreements, &ids, None);
        assert_eq!(c.walk.as_ref().unwrap().order, vec![0]);
        c.set(0, "r0", "framing", t("head only"), "2026-12-05T10:00:00Z");
        // dee settles it otherwise, later: that is the value shown.
        c.coder = "dee".into();
        c.set(0, "r0", "framing", t("full length"), "2026-12-05T11:00:00Z");
        c.coder = "cy".into();
        assert_eq!(
            c.code("r0", "framing").unwrap().value,
            t("full length").unwrap()
        );
        // cy's own earlier value, set again, becomes the latest.
        assert!(c.set(0, "r0", "framing", t("head only"), "2026-12-05T12:00:00Z"));
        assert_eq!(
            c.code("r0", "framing").unwrap().value,
            t("head only").unwrap()
        );
        assert!(!c.set(0, "r0", "framing", t("head only"), "2026-12-05T12:30:00Z"));
        // Clearing clears every settled value of it, in one step; undo brings both back.
        assert!(c.set(0, "r0", "framing", None, "2026-12-05T13:00:00Z"));
        assert!(c.settled_code("r0", "framing").is_none());
        assert_eq!(c.clearings().len(), 2);
        c.undo();
        assert_eq!(c.code("r0", "framing").unwrap().coder, "cy");
        assert_eq!(c.codes.iter().filter(|c| c.settled).count(), 2);
        assert!(c.clearings().is_empty());
        // A third coder disagrees on r2: a recount takes it into the walk, which stays on r0.
        c.walk.as_mut().unwrap().pos = 0;
        c.coder = "eve".into();
        c.set_own(1, "r1", "framing", t("head only"), T);
        c.set_own(2, "r2", "framing", t("head only"), T);
        c.coder = "ana".into();
        c.set_own(2, "r2", "framing", t("full length"), T);
        assert!(c.take_stale() && !c.take_stale());
        c.coder = "cy".into();
        c.recount(&ids);
        assert_eq!(c.walk.as_ref().unwrap().order, vec![0, 1, 2]);
        assert_eq!(c.current(), Some(0));
        assert_eq!(c.progress()[0], ("framing".to_string(), 1, 3));
        // Undo of a code set outside the walk's items leaves the walk where it stands.
        c.start(&[0, 1], Order::Map, &ids, None);
        c.key("Enter", false, T, &ids);
        c.set_own(2, "r2", "signed", Some(CodeValue::YesNo(true)), T);
        c.undo();
        assert_eq!(c.current(), Some(1));
    }
}
