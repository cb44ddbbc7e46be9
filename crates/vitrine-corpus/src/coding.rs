//! Coding a corpus: a codebook of variables defined by the user, codes that record one coder's
//! value for one item and variable (with the coder's name and the time), the value each item ends
//! up with when several people coded it, merging coders' files, and the agreement table.
//!
//! Codes are never dropped: a merge keeps every coder's code, settling a disagreement adds a
//! settled code beside the originals, and codes that no longer fit the codebook are reported by
//! [`check_codes`] for the user to resolve, not removed.

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};

use serde::{Deserialize, Serialize};

use crate::agreement::{cohen_kappa, krippendorff_alpha, percent_agreement, Metric};
use crate::export::{cell, csv_row, number, CsvStyle};
use crate::CorpusError;

/// What a variable records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Kind {
    /// One of the listed values.
    One,
    /// Any number of the listed values (none allowed).
    Several,
    /// Yes or no.
    YesNo,
    /// A number.
    Number,
    /// Free text.
    Note,
}

impl Kind {
    pub fn label(self) -> &'static str {
        match self {
            Kind::One => "one choice",
            Kind::Several => "several choices",
            Kind::YesNo => "yes/no",
            Kind::Number => "number",
            Kind::Note => "note",
        }
    }
}

/// One value of a choice variable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ValueDef {
    pub value: String,
    /// The number key (1-9) that sets it in the coding view.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub key: Option<u8>,
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub description: String,
}

/// One variable of the codebook.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Variable {
    pub name: String,
    pub kind: Kind,
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub description: String,
    /// The values of a one-choice or several-choice variable, in the order they are offered.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub values: Vec<ValueDef>,
}

impl Variable {
    pub fn value_index(&self, v: &str) -> Option<usize> {
        self.values.iter().position(|d| d.value == v)
    }
}

/// The variables a corpus is coded against.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct Codebook {
    pub variables: Vec<Variable>,
}

impl Codebook {
    pub fn is_empty(&self) -> bool {
        self.variables.is_empty()
    }

    pub fn variable(&self, name: &str) -> Option<&Variable> {
        self.variables.iter().find(|v| v.name == name)
    }

    /// Refuses a codebook a coder could not use unambiguously: names empty or repeated, a choice
    /// variable without values, a value repeated, a key outside 1-9 or used twice in a variable,
    /// values on a variable that takes none, `;` in a several-choice value (it separates values in
    /// CSV cells).
    pub fn check(&self) -> Result<(), CorpusError> {
        let bad = |v: &Variable, why: String| {
            Err(CorpusError::Invalid(format!(
                "codebook variable {:?}: {why}",
                v.name
            )))
        };
        let mut names = BTreeSet::new();
        for v in &self.variables {
            if v.name.trim().is_empty() {
                return Err(CorpusError::Invalid(
                    "codebook: a variable has an empty name".into(),
                ));
            }
            if v.name.trim() != v.name {
                return bad(v, "the name begins or ends with a space".into());
            }
            if !names.insert(v.name.as_str()) {
                return bad(v, "the name is used twice".into());
            }
            match v.kind {
                Kind::One | Kind::Several if v.values.is_empty() => {
                    return bad(v, format!("a {} variable needs values", v.kind.label()))
                }
                Kind::YesNo | Kind::Number | Kind::Note if !v.values.is_empty() => {
                    return bad(
                        v,
                        format!("a {} variable takes no list of values", v.kind.label()),
                    )
                }
                _ => {}
            }
            let mut seen = BTreeSet::new();
            let mut keys = BTreeSet::new();
            for d in &v.values {
                if d.value.trim().is_empty() || d.value.trim() != d.value {
                    return bad(
                        v,
                        format!("value {:?}: empty, or begins or ends with a space", d.value),
                    );
                }
                if !seen.insert(d.value.as_str()) {
                    return bad(v, format!("value {:?} is listed twice", d.value));
                }
                if v.kind == Kind::Several && d.value.contains(';') {
                    return bad(
                        v,
                        format!(
                            "value {:?}: a several-choice value may not hold ';' (it separates values in CSV cells)",
                            d.value
                        ),
                    );
                }
                if let Some(k) = d.key {
                    if !(1..=9).contains(&k) {
                        return bad(v, format!("value {:?}: key {k} is not 1-9", d.value));
                    }
                    if !keys.insert(k) {
                        return bad(v, format!("key {k} is given to two values"));
                    }
                }
            }
        }
        Ok(())
    }
}

/// A coded value, as the corpus file writes it: `true`/`false` (yes/no), a number, a text (the
/// chosen value of a one-choice variable, or a note), or a list (several choices).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum CodeValue {
    YesNo(bool),
    Number(f64),
    Text(String),
    Several(Vec<String>),
}

impl CodeValue {
    /// As one CSV cell: yes/no, the number, the text, several values joined by "; ".
    pub fn cell(&self) -> String {
        match self {
            CodeValue::YesNo(true) => "yes".into(),
            CodeValue::YesNo(false) => "no".into(),
            CodeValue::Number(x) => format_number(*x),
            CodeValue::Text(t) => t.clone(),
            CodeValue::Several(vs) if vs.is_empty() => "-".into(),
            CodeValue::Several(vs) => vs.join("; "),
        }
    }

    /// Whether two values say the same: several choices as sets (in whatever order they were
    /// listed), numbers by value, the rest as they are.
    pub fn same(&self, other: &CodeValue) -> bool {
        match (self, other) {
            (CodeValue::Several(a), CodeValue::Several(b)) => {
                let (x, y): (BTreeSet<&String>, BTreeSet<&String>) =
                    (a.iter().collect(), b.iter().collect());
                x == y
            }
            (a, b) => a == b,
        }
    }

    /// Reads a CSV cell for a variable (the inverse of [`CodeValue::cell`]); None for an empty
    /// cell (not coded). Several choices are written in the codebook's order; "-" is a
    /// several-choice item coded with none of the values.
    pub fn parse(var: &Variable, cell: &str) -> Result<Option<CodeValue>, String> {
        // A cell the spreadsheet-safe CSV defused ("'=…", "'-") reads back as it was written.
        let cell = match cell.strip_prefix('\'') {
            Some(rest) if crate::export::looks_like_formula(rest) => rest,
            _ => cell,
        };
        let t = cell.trim();
        if t.is_empty() {
            return Ok(None);
        }
        let v = match var.kind {
            Kind::YesNo => match t.to_lowercase().as_str() {
                "yes" | "y" | "true" | "1" => CodeValue::YesNo(true),
                "no" | "n" | "false" | "0" => CodeValue::YesNo(false),
                _ => return Err(format!("{t:?} is not yes or no")),
            },
            Kind::Number => match t.parse::<f64>() {
                Ok(x) if x.is_finite() => CodeValue::Number(x),
                _ => return Err(format!("{t:?} is not a number")),
            },
            Kind::Note => CodeValue::Text(cell.to_string()),
            Kind::One => CodeValue::Text(t.to_string()),
            Kind::Several => {
                let mut chosen: Vec<&str> = t
                    .split(';')
                    .map(str::trim)
                    .filter(|s| !s.is_empty())
                    .collect();
                if chosen == ["-"] {
                    chosen.clear();
                }
                let mut idx = Vec::new();
                for c in chosen {
                    idx.push(var.value_index(c).ok_or_else(|| not_listed(var, c))?);
                }
                idx.sort_unstable();
                idx.dedup();
                CodeValue::Several(idx.iter().map(|&i| var.values[i].value.clone()).collect())
            }
        };
        fits(var, &v)?;
        Ok(Some(v))
    }
}

fn format_number(x: f64) -> String {
    if x.fract() == 0.0 && x.abs() < 1e15 {
        format!("{}", x as i64)
    } else {
        format!("{x}")
    }
}

fn not_listed(var: &Variable, v: &str) -> String {
    let listed: Vec<&str> = var.values.iter().map(|d| d.value.as_str()).collect();
    format!(
        "{v:?} is not a value of {:?} in the codebook (its values: {})",
        var.name,
        listed.join(", ")
    )
}

/// Whether `v` is a value `var` can take; the reason when not.
pub fn fits(var: &Variable, v: &CodeValue) -> Result<(), String> {
    match (var.kind, v) {
        (Kind::YesNo, CodeValue::YesNo(_)) => Ok(()),
        (Kind::Number, CodeValue::Number(x)) if x.is_finite() => Ok(()),
        (Kind::Note, CodeValue::Text(_)) => Ok(()),
        (Kind::One, CodeValue::Text(t)) => match var.value_index(t) {
            Some(_) => Ok(()),
            None => Err(not_listed(var, t)),
        },
        (Kind::Several, CodeValue::Several(vs)) => {
            let mut seen = BTreeSet::new();
            for t in vs {
                var.value_index(t).ok_or_else(|| not_listed(var, t))?;
                if !seen.insert(t) {
                    return Err(format!("{t:?} is given twice"));
                }
            }
            Ok(())
        }
        (k, v) => Err(format!(
            "{} is not a value of a {} variable",
            serde_json::to_string(v).unwrap_or_default(),
            k.label()
        )),
    }
}

/// One coder's value for one item and variable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Code {
    /// The item's id.
    pub item: String,
    pub variable: String,
    pub value: CodeValue,
    pub coder: String,
    /// UTC, RFC 3339.
    pub time: String,
    /// A value agreed after a disagreement (by `coder`), kept beside the coders' own codes.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub settled: bool,
}

/// Which code: item id, variable, coder, settled or not.
pub type CodeKey = (String, String, String, bool);

impl Code {
    fn key(&self) -> (&str, &str, &str, bool) {
        (&self.item, &self.variable, &self.coder, self.settled)
    }

    /// The code's key, owned (to index and store codes by).
    pub fn owned_key(&self) -> CodeKey {
        (
            self.item.clone(),
            self.variable.clone(),
            self.coder.clone(),
            self.settled,
        )
    }
}

/// A code its coder took back (cleared), and when: kept so that merging a file that still holds
/// the older code does not bring it back.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Cleared {
    pub item: String,
    pub variable: String,
    pub coder: String,
    /// UTC, RFC 3339.
    pub time: String,
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub settled: bool,
}

impl Cleared {
    pub fn owned_key(&self) -> CodeKey {
        (
            self.item.clone(),
            self.variable.clone(),
            self.coder.clone(),
            self.settled,
        )
    }

    pub fn of(key: &CodeKey, time: &str) -> Cleared {
        Cleared {
            item: key.0.clone(),
            variable: key.1.clone(),
            coder: key.2.clone(),
            time: time.to_string(),
            settled: key.3,
        }
    }
}

/// Where each code is in `codes`, by its key.
fn index_by_key(codes: &[Code]) -> HashMap<CodeKey, usize> {
    codes
        .iter()
        .enumerate()
        .map(|(i, c)| (c.owned_key(), i))
        .collect()
}

/// An RFC 3339 time as (date and time to the second, fraction as digits padded to nine), so that
/// "…:41Z" and "…:41.123Z" order as the times they are (as strings they would not). None when the
/// text is not a UTC time of that form.
pub fn time_order(t: &str) -> Option<(&str, u32)> {
    let body = t.strip_suffix('Z')?;
    let (whole, frac) = match body.split_once('.') {
        Some((w, f)) => (w, f),
        None => (body, ""),
    };
    let b = whole.as_bytes();
    let shape = b.len() == 19
        && b.iter().enumerate().all(|(i, c)| match i {
            4 | 7 => *c == b'-',
            10 => *c == b'T',
            13 | 16 => *c == b':',
            _ => c.is_ascii_digit(),
        });
    if !shape || frac.len() > 9 || !frac.bytes().all(|c| c.is_ascii_digit()) {
        return None;
    }
    let mut nanos = 0u32;
    for i in 0..9 {
        nanos = nanos * 10 + frac.as_bytes().get(i).map_or(0, |c| (c - b'0') as u32);
    }
    Some((whole, nanos))
}

/// A code's or clearing's item, variable and coder are named and its time can be ordered; `at`
/// says which entry.
fn check_named_and_timed(
    at: &dyn Fn() -> String,
    [item, variable, coder]: [&String; 3],
    time: &str,
) -> Result<(), CorpusError> {
    if item.is_empty() || variable.is_empty() || coder.trim().is_empty() {
        return Err(CorpusError::Invalid(format!(
            "{}: the item, variable and coder must be named",
            at()
        )));
    }
    if time_order(time).is_none() {
        return Err(CorpusError::Invalid(format!(
            "{}: time {time:?} is not a UTC time as 2026-12-05T10:30:00Z",
            at()
        )));
    }
    Ok(())
}

/// Checks the codes' own form (a time the reader can order, names not empty, one code per item,
/// variable, coder and kind). Whether they fit the codebook is [`check_codes`]'s question.
pub fn check_form(codes: &[Code]) -> Result<(), CorpusError> {
    let mut seen = BTreeSet::new();
    for (k, c) in codes.iter().enumerate() {
        let at = || format!("code {} of {} (item {:?})", k + 1, codes.len(), c.item);
        check_named_and_timed(&at, [&c.item, &c.variable, &c.coder], &c.time)?;
        if !seen.insert(c.key()) {
            return Err(CorpusError::Invalid(format!(
                "{}: {} coded variable {:?} of this item twice",
                at(),
                c.coder,
                c.variable
            )));
        }
    }
    Ok(())
}

/// A code that does not fit the codebook.
#[derive(Debug, Clone, PartialEq)]
pub struct Misfit {
    pub code: usize,
    pub why: String,
}

/// The codes that do not fit `book`: a variable it lacks, a value it does not list, a value of the
/// wrong kind. Nothing is removed: the caller reports them and asks the user to extend the
/// codebook or recode.
pub fn check_codes(book: &Codebook, codes: &[Code]) -> Vec<Misfit> {
    codes
        .iter()
        .enumerate()
        .filter_map(|(k, c)| {
            let why = match book.variable(&c.variable) {
                None => Some(format!("the codebook has no variable {:?}", c.variable)),
                Some(var) => fits(var, &c.value).err(),
            };
            why.map(|why| Misfit { code: k, why })
        })
        .collect()
}

/// The misfits in words, the first few in full: for error messages.
pub fn describe_misfits(codes: &[Code], misfits: &[Misfit]) -> String {
    let mut out = format!(
        "{} code{} do{} not fit the codebook",
        misfits.len(),
        if misfits.len() == 1 { "" } else { "s" },
        if misfits.len() == 1 { "es" } else { "" }
    );
    for m in misfits.iter().take(5) {
        let c = &codes[m.code];
        out.push_str(&format!(
            "\n  item {:?}, {:?} by {}: {}",
            c.item, c.variable, c.coder, m.why
        ));
    }
    if misfits.len() > 5 {
        out.push_str(&format!("\n  … and {} more", misfits.len() - 5));
    }
    out
}

/// Renames `old` to `new` in the codes of a choice variable (one or several choices), as a user
/// does after renaming or merging values of the codebook. Returns how many codes changed.
pub fn recode(codes: &mut [Code], variable: &str, old: &str, new: &str) -> usize {
    let mut n = 0;
    for c in codes.iter_mut().filter(|c| c.variable == variable) {
        match &mut c.value {
            CodeValue::Text(t) if t == old => {
                *t = new.to_string();
                n += 1;
            }
            CodeValue::Several(vs) if vs.iter().any(|t| t == old) => {
                for t in vs.iter_mut() {
                    if t == old {
                        *t = new.to_string();
                    }
                }
                let mut seen = BTreeSet::new();
                vs.retain(|t| seen.insert(t.clone()));
                n += 1;
            }
            _ => {}
        }
    }
    n
}

/// A codebook that both files can be read against, or why there is none: variables of one name
/// must have one kind and the same values (a value only one coder could choose would make their
/// agreement meaningless). Variables only one file has are taken over. Keys and descriptions
/// come from `a`.
pub fn merge_codebooks(a: &Codebook, b: &Codebook) -> Result<Codebook, String> {
    let mut out = a.clone();
    for vb in &b.variables {
        match a.variable(&vb.name) {
            None => out.variables.push(vb.clone()),
            Some(va) => {
                if va.kind != vb.kind {
                    return Err(format!(
                        "variable {:?} is {} in one codebook and {} in the other",
                        va.name,
                        va.kind.label(),
                        vb.kind.label()
                    ));
                }
                let sa: BTreeSet<&str> = va.values.iter().map(|d| d.value.as_str()).collect();
                let sb: BTreeSet<&str> = vb.values.iter().map(|d| d.value.as_str()).collect();
                if sa != sb {
                    let only = |x: &BTreeSet<&str>, y: &BTreeSet<&str>| {
                        x.difference(y)
                            .map(|s| format!("{s:?}"))
                            .collect::<Vec<_>>()
                    };
                    let (oa, ob) = (only(&sa, &sb), only(&sb, &sa));
                    let mut why = format!("variable {:?} has other values:", va.name);
                    if !oa.is_empty() {
                        why.push_str(&format!(" only the first has {}", oa.join(", ")));
                    }
                    if !ob.is_empty() {
                        if !oa.is_empty() {
                            why.push(';');
                        }
                        why.push_str(&format!(" only the second has {}", ob.join(", ")));
                    }
                    return Err(why);
                }
            }
        }
    }
    Ok(out)
}

/// What a merge of codes did.
#[derive(Debug, Default, Clone, PartialEq)]
pub struct MergeReport {
    pub added: usize,
    pub same: usize,
    /// The same coder coded an item's variable differently in the two files: the later code is
    /// kept (both are counted here, so that it can be said).
    pub replaced_by_later: usize,
    pub kept_later: usize,
    /// Codes left out (or taken out) because their coder cleared them later, in either file.
    pub cleared_later: usize,
}

/// Merges `other` into `codes`: every code of another coder, item or variable is added; where the
/// same coder coded the same item and variable in both, the later one stays.
pub fn merge_codes(codes: &mut Vec<Code>, other: &[Code]) -> MergeReport {
    let mut r = MergeReport::default();
    let mut at = index_by_key(codes);
    for c in other {
        let key = c.owned_key();
        match at.get(&key) {
            None => {
                at.insert(key, codes.len());
                codes.push(c.clone());
                r.added += 1;
            }
            Some(&i) if codes[i].value.same(&c.value) => r.same += 1,
            Some(&i) => {
                if time_order(&c.time) > time_order(&codes[i].time) {
                    codes[i] = c.clone();
                    r.replaced_by_later += 1;
                } else {
                    r.kept_later += 1;
                }
            }
        }
    }
    r
}

/// Merges another file's codes and clearings into these ([`merge_codes`], then the clearings): a
/// code stays unless its coder cleared it later (in either file); a clearing stays while no later
/// code of its key is there.
pub fn merge_coding(
    codes: &mut Vec<Code>,
    cleared: &mut Vec<Cleared>,
    other: &[Code],
    other_cleared: &[Cleared],
) -> MergeReport {
    let here: HashSet<CodeKey> = codes.iter().map(Code::owned_key).collect();
    let mut r = merge_codes(codes, other);
    let mut at: HashMap<CodeKey, usize> = cleared
        .iter()
        .enumerate()
        .map(|(i, c)| (c.owned_key(), i))
        .collect();
    for c in other_cleared {
        match at.get(&c.owned_key()) {
            None => {
                at.insert(c.owned_key(), cleared.len());
                cleared.push(c.clone());
            }
            Some(&i) if time_order(&c.time) > time_order(&cleared[i].time) => {
                cleared[i] = c.clone()
            }
            Some(_) => {}
        }
    }
    let gone = apply_clearings(codes, cleared);
    r.cleared_later = gone.len();
    // A code of the other file left out was never added.
    r.added -= gone.iter().filter(|k| !here.contains(*k)).count();
    r
}

/// Where a code and a clearing of the same key are both there, the later stands: a code cleared
/// later (or at the same time) goes, a clearing followed by a later code goes. Returns the keys
/// of the codes that went.
pub fn apply_clearings(codes: &mut Vec<Code>, cleared: &mut Vec<Cleared>) -> Vec<CodeKey> {
    if cleared.is_empty() {
        return vec![];
    }
    let at: HashMap<CodeKey, &str> = cleared
        .iter()
        .map(|c| (c.owned_key(), c.time.as_str()))
        .collect();
    let mut gone = Vec::new();
    codes.retain(|c| {
        let stays = at
            .get(&c.owned_key())
            .is_none_or(|t| time_order(&c.time) > time_order(t));
        if !stays {
            gone.push(c.owned_key());
        }
        stays
    });
    let live: HashSet<CodeKey> = codes.iter().map(Code::owned_key).collect();
    cleared.retain(|c| !live.contains(&c.owned_key()));
    gone
}

/// Checks the clearings' form: names given, a time the reader can order, one per key.
pub fn check_cleared(cleared: &[Cleared]) -> Result<(), CorpusError> {
    let mut seen = HashSet::new();
    for (k, c) in cleared.iter().enumerate() {
        let at = || format!("cleared {} of {} (item {:?})", k + 1, cleared.len(), c.item);
        check_named_and_timed(&at, [&c.item, &c.variable, &c.coder], &c.time)?;
        if !seen.insert(c.owned_key()) {
            return Err(CorpusError::Invalid(format!("{}: listed twice", at())));
        }
    }
    Ok(())
}

/// How an item's value of a variable was reached.
#[derive(Debug, Clone, PartialEq)]
pub enum Outcome {
    /// Nobody coded it.
    Uncoded,
    /// One coder coded it.
    One(CodeValue),
    /// Several coders coded it alike.
    Agreed(CodeValue),
    /// Several coders coded it differently and nobody settled it.
    Disagreed,
    /// Settled after a disagreement.
    Settled(CodeValue),
}

impl Outcome {
    pub fn value(&self) -> Option<&CodeValue> {
        match self {
            Outcome::One(v) | Outcome::Agreed(v) | Outcome::Settled(v) => Some(v),
            Outcome::Uncoded | Outcome::Disagreed => None,
        }
    }
}

/// Item id -> each coder's code of it (index into [`Coded::coders`], code).
type ByItem<'a> = HashMap<&'a str, Vec<(usize, &'a Code)>>;

/// Reads a code's value as a number for the agreement measures (None: not of this variable).
type Reader<'a> = Box<dyn Fn(&CodeValue) -> Option<f64> + 'a>;

/// The codes of a corpus arranged for reading: by variable, by item, by coder.
pub struct Coded<'a> {
    /// Coders in order of their names (settled codes not counted as a coder's).
    pub coders: Vec<&'a str>,
    /// variable -> item -> the coders' codes (index into `coders`, code).
    by: HashMap<&'a str, ByItem<'a>>,
    /// variable -> item -> the latest settled code.
    settled: HashMap<&'a str, HashMap<&'a str, &'a Code>>,
}

impl<'a> Coded<'a> {
    pub fn new(codes: &'a [Code]) -> Coded<'a> {
        let coders: Vec<&str> = codes
            .iter()
            .filter(|c| !c.settled)
            .map(|c| c.coder.as_str())
            .collect::<BTreeSet<_>>()
            .into_iter()
            .collect();
        let coder_index: HashMap<&str, usize> =
            coders.iter().enumerate().map(|(i, c)| (*c, i)).collect();
        let mut by: HashMap<&str, ByItem> = HashMap::new();
        let mut settled: HashMap<&str, HashMap<&str, &Code>> = HashMap::new();
        for c in codes {
            if c.settled {
                let e = settled
                    .entry(c.variable.as_str())
                    .or_default()
                    .entry(c.item.as_str())
                    .or_insert(c);
                // The latest; on equal times the settler's name decides, as the viewer does.
                if (time_order(&c.time), &c.coder) > (time_order(&e.time), &e.coder) {
                    *e = c;
                }
            } else {
                by.entry(c.variable.as_str())
                    .or_default()
                    .entry(c.item.as_str())
                    .or_default()
                    .push((coder_index[c.coder.as_str()], c));
            }
        }
        Coded {
            coders,
            by,
            settled,
        }
    }

    /// Each coder's code of `item` for `variable` (index into `coders`).
    pub fn codes_of(&self, variable: &str, item: &str) -> &[(usize, &'a Code)] {
        self.by
            .get(variable)
            .and_then(|m| m.get(item))
            .map_or(&[], |v| v.as_slice())
    }

    pub fn outcome(&self, variable: &str, item: &str) -> Outcome {
        if let Some(c) = self.settled.get(variable).and_then(|m| m.get(item)) {
            return Outcome::Settled(c.value.clone());
        }
        match self.codes_of(variable, item) {
            [] => Outcome::Uncoded,
            [(_, c)] => Outcome::One(c.value.clone()),
            [(_, first), rest @ ..] => {
                if rest.iter().all(|(_, c)| c.value.same(&first.value)) {
                    Outcome::Agreed(first.value.clone())
                } else {
                    Outcome::Disagreed
                }
            }
        }
    }

    /// The coders who coded `variable` at all.
    pub fn coders_of(&self, variable: &str) -> Vec<usize> {
        let mut s = BTreeSet::new();
        if let Some(m) = self.by.get(variable) {
            for v in m.values() {
                s.extend(v.iter().map(|(k, _)| *k));
            }
        }
        s.into_iter().collect()
    }
}

/// One row of the agreement table: a variable (for several choices, one of its values, read as
/// present or absent).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AgreementRow {
    pub variable: String,
    /// The value a several-choice row is about; empty otherwise.
    pub value: String,
    pub kind: Kind,
    /// Coders who coded this variable.
    pub coders: usize,
    /// Items of the corpus at least two of them coded.
    pub items_compared: usize,
    pub percent_agreement: Option<f64>,
    /// Only when exactly two coders coded the variable.
    pub cohen_kappa: Option<f64>,
    pub alpha_nominal: Option<f64>,
    /// Only for number variables.
    pub alpha_interval: Option<f64>,
}

/// A variable's codes as numbers for the agreement measures: a choice by its index in the
/// codebook, yes/no as 1/0, a number as itself; a several-choice variable gives one row per value
/// (1 when chosen, 0 when not). Notes are not compared.
fn numeric_rows(var: &Variable) -> Vec<(String, Reader<'_>)> {
    match var.kind {
        Kind::Note => vec![],
        Kind::One => vec![(
            String::new(),
            Box::new(move |v| match v {
                CodeValue::Text(t) => var.value_index(t).map(|i| i as f64),
                _ => None,
            }),
        )],
        Kind::YesNo => vec![(
            String::new(),
            Box::new(|v| match v {
                CodeValue::YesNo(b) => Some(f64::from(u8::from(*b))),
                _ => None,
            }),
        )],
        Kind::Number => vec![(
            String::new(),
            Box::new(|v| match v {
                CodeValue::Number(x) => Some(*x),
                _ => None,
            }),
        )],
        Kind::Several => var
            .values
            .iter()
            .map(|d| {
                let name = d.value.as_str();
                let f: Reader = Box::new(move |v| match v {
                    CodeValue::Several(vs) => {
                        Some(f64::from(u8::from(vs.iter().any(|t| t == name))))
                    }
                    _ => None,
                });
                (d.value.clone(), f)
            })
            .collect(),
    }
}

/// The agreement table over `items` (ids of the corpus): one row per variable (per value for
/// several choices) of the codebook, notes left out. Settled codes are not a coder's and do not
/// count.
pub fn agreement_table(book: &Codebook, coded: &Coded, items: &[&str]) -> Vec<AgreementRow> {
    let mut rows = Vec::new();
    for var in &book.variables {
        let who = coded.coders_of(&var.name);
        let slot: HashMap<usize, usize> = who.iter().enumerate().map(|(s, &k)| (k, s)).collect();
        for (value, read) in numeric_rows(var) {
            let mut table: Vec<Vec<Option<f64>>> = vec![vec![None; items.len()]; who.len()];
            for (u, item) in items.iter().enumerate() {
                for (k, c) in coded.codes_of(&var.name, item) {
                    table[slot[k]][u] = read(&c.value);
                }
            }
            let compared = (0..items.len())
                .filter(|&u| table.iter().filter(|c| c[u].is_some()).count() >= 2)
                .count();
            rows.push(AgreementRow {
                variable: var.name.clone(),
                value,
                kind: var.kind,
                coders: who.len(),
                items_compared: compared,
                percent_agreement: percent_agreement(&table),
                cohen_kappa: if who.len() == 2 {
                    cohen_kappa(&table[0], &table[1])
                } else {
                    None
                },
                alpha_nominal: krippendorff_alpha(&table, Metric::Nominal),
                alpha_interval: (var.kind == Kind::Number)
                    .then(|| krippendorff_alpha(&table, Metric::Interval))
                    .flatten(),
            });
        }
    }
    rows
}

/// An item whose coders disagree on a variable, with each coder's value (None: not coded).
#[derive(Debug, Clone, PartialEq)]
pub struct Disagreement {
    pub item: String,
    pub variable: String,
    pub values: Vec<Option<CodeValue>>,
    /// The settled value, when someone settled it.
    pub settled: Option<CodeValue>,
}

/// Every item of `items` on which the coders of a variable disagree, in the order of the codebook
/// and then of `items`; settled ones included, with their settled value.
pub fn disagreements(book: &Codebook, coded: &Coded, items: &[&str]) -> Vec<Disagreement> {
    let mut out = Vec::new();
    for var in &book.variables {
        for item in items {
            let codes = coded.codes_of(&var.name, item);
            if codes.len() < 2 || codes.iter().all(|(_, c)| c.value.same(&codes[0].1.value)) {
                continue;
            }
            let mut values = vec![None; coded.coders.len()];
            for (k, c) in codes {
                values[*k] = Some(c.value.clone());
            }
            out.push(Disagreement {
                item: item.to_string(),
                variable: var.name.clone(),
                values,
                settled: match coded.outcome(&var.name, item) {
                    Outcome::Settled(v) => Some(v),
                    _ => None,
                },
            });
        }
    }
    out
}

/// One column a CSV export adds for the codes.
#[derive(Debug, Clone, PartialEq)]
pub struct CodeColumn {
    pub header: String,
    /// The column holds numbers (a number variable): written as they are.
    pub numeric: bool,
    variable: String,
    /// Some(coder index): that coder's own code; None: the item's value.
    coder: Option<usize>,
}

impl CodeColumn {
    /// The cell of `item`: the value (agreed, single or settled; empty when uncoded or when the
    /// coders disagree and nobody settled it), or one coder's own code.
    pub fn cell(&self, coded: &Coded, item: &str) -> String {
        match self.coder {
            None => coded
                .outcome(&self.variable, item)
                .value()
                .map(CodeValue::cell)
                .unwrap_or_default(),
            Some(k) => coded
                .codes_of(&self.variable, item)
                .iter()
                .find(|(j, _)| *j == k)
                .map(|(_, c)| c.value.cell())
                .unwrap_or_default(),
        }
    }
}

/// The code columns of a CSV export, one per variable, named as the variable (with " (code)"
/// added when a catalogue field in `taken` has that name); a variable that two or more people
/// coded also gets one column per coder, "variable [coder]".
pub fn code_columns(book: &Codebook, coded: &Coded, taken: &[&str]) -> Vec<CodeColumn> {
    let mut out = Vec::new();
    for v in &book.variables {
        let name = if taken.contains(&v.name.as_str()) {
            format!("{} (code)", v.name)
        } else {
            v.name.clone()
        };
        let numeric = v.kind == Kind::Number;
        let who = coded.coders_of(&v.name);
        out.push(CodeColumn {
            header: name.clone(),
            numeric,
            variable: v.name.clone(),
            coder: None,
        });
        if who.len() >= 2 {
            for k in who {
                out.push(CodeColumn {
                    header: format!("{name} [{}]", coded.coders[k]),
                    numeric,
                    variable: v.name.clone(),
                    coder: Some(k),
                });
            }
        }
    }
    out
}

/// Puts `new` codes in place: each replaces a code of the same item, variable, coder and kind
/// (settled or not), or is added. Returns how many replaced one.
pub fn set_codes(codes: &mut Vec<Code>, new: Vec<Code>) -> usize {
    let mut at = index_by_key(codes);
    let mut replaced = 0;
    for c in new {
        let key = c.owned_key();
        match at.get(&key) {
            Some(&i) => {
                codes[i] = c;
                replaced += 1;
            }
            None => {
                at.insert(key, codes.len());
                codes.push(c);
            }
        }
    }
    replaced
}

/// How many items of `items` have a value (coded, agreed or settled) for each variable.
pub fn progress(book: &Codebook, coded: &Coded, items: &[&str]) -> BTreeMap<String, usize> {
    book.variables
        .iter()
        .map(|v| {
            let n = items
                .iter()
                .filter(|i| coded.outcome(&v.name, i).value().is_some())
                .count();
            (v.name.clone(), n)
        })
        .collect()
}

fn num(x: Option<f64>) -> String {
    x.map(number).unwrap_or_default()
}

/// The agreement table as CSV: one row per variable (per value of a several-choice variable).
pub fn agreement_csv(book: &Codebook, coded: &Coded, items: &[&str]) -> String {
    let mut out = String::new();
    csv_row(
        &mut out,
        [
            "variable",
            "value",
            "kind",
            "coders",
            "items_compared",
            "percent_agreement",
            "cohen_kappa",
            "alpha_nominal",
            "alpha_interval",
        ]
        .into_iter(),
    );
    for r in agreement_table(book, coded, items) {
        let cells = [
            cell(&r.variable, false, CsvStyle::Spreadsheet).into_owned(),
            cell(&r.value, false, CsvStyle::Spreadsheet).into_owned(),
            r.kind.label().to_string(),
            r.coders.to_string(),
            r.items_compared.to_string(),
            num(r.percent_agreement),
            num(r.cohen_kappa),
            num(r.alpha_nominal),
            num(r.alpha_interval),
        ];
        csv_row(&mut out, cells.iter().map(String::as_str));
    }
    out
}

/// Every disagreement as CSV: id, variable, each coder's value, the settled value.
pub fn disagreements_csv(book: &Codebook, coded: &Coded, items: &[&str], id_col: &str) -> String {
    let mut out = String::new();
    let mut head: Vec<String> = vec![id_col.to_string(), "variable".into()];
    head.extend(coded.coders.iter().map(|c| c.to_string()));
    head.push("settled".into());
    let head: Vec<String> = head
        .iter()
        .map(|h| cell(h, false, CsvStyle::Spreadsheet).into_owned())
        .collect();
    csv_row(&mut out, head.iter().map(String::as_str));
    for d in disagreements(book, coded, items) {
        let mut cells = vec![d.item.clone(), d.variable.clone()];
        cells.extend(
            d.values
                .iter()
                .map(|v| v.as_ref().map(CodeValue::cell).unwrap_or_default()),
        );
        cells.push(d.settled.as_ref().map(CodeValue::cell).unwrap_or_default());
        let cells: Vec<String> = cells
            .iter()
            .map(|c| cell(c, false, CsvStyle::Spreadsheet).into_owned())
            .collect();
        csv_row(&mut out, cells.iter().map(String::as_str));
    }
    out
}

/// Every code as one row (long form, for R and pandas): id, variable, value, coder, time, settled.
pub fn codes_csv(codes: &[Code], order: &HashMap<&str, usize>, id_col: &str) -> String {
    let mut out = String::new();
    csv_row(
        &mut out,
        [id_col, "variable", "value", "coder", "time", "settled"]
            .map(|h| cell(h, false, CsvStyle::Spreadsheet).into_owned())
            .iter()
            .map(String::as_str),
    );
    let mut sorted: Vec<&Code> = codes.iter().collect();
    sorted.sort_by(|a, b| {
        let pos = |c: &Code| order.get(c.item.as_str()).copied().unwrap_or(usize::MAX);
        (pos(a), &a.item, &a.variable, a.settled, &a.coder).cmp(&(
            pos(b),
            &b.item,
            &b.variable,
            b.settled,
            &b.coder,
        ))
    });
    for c in sorted {
        let numeric = matches!(c.value, CodeValue::Number(_));
        let cells = [
            cell(&c.item, false, CsvStyle::Spreadsheet).into_owned(),
            cell(&c.variable, false, CsvStyle::Spreadsheet).into_owned(),
            cell(&c.value.cell(), numeric, CsvStyle::Spreadsheet).into_owned(),
            cell(&c.coder, false, CsvStyle::Spreadsheet).into_owned(),
            c.time.clone(),
            if c.settled { "yes" } else { "no" }.to_string(),
        ];
        csv_row(&mut out, cells.iter().map(String::as_str));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    pub fn book() -> Codebook {
        serde_json::from_str(
            r#"{"variables": [
                {"name": "framing", "kind": "one", "values": [
                    {"value": "full length", "key": 1}, {"value": "half length", "key": 2},
                    {"value": "head only", "key": 3, "description": "the head and at most the neck"}]},
                {"name": "motifs", "kind": "several", "values": [{"value": "tree"}, {"value": "river"}]},
                {"name": "signed", "kind": "yes-no"},
                {"name": "figures", "kind": "number"},
                {"name": "remarks", "kind": "note"}]}"#,
        )
        .unwrap()
    }

    fn code(item: &str, var: &str, value: CodeValue, coder: &str, time: &str) -> Code {
        Code {
            item: item.into(),
            variable: var.into(),
            value,
            coder: coder.into(),
            time: time.into(),
            settled: false,
        }
    }

    fn t(s: &str) -> CodeValue {
        CodeValue::Text(s.into())
    }

    #[test]
    fn a_codebook_a_coder_could_misread_is_refused_with_the_variable_named() {
        assert!(book().check().is_ok());
        let cases = [
            (
                r#"{"name": "a", "kind": "one", "values": []}"#,
                "needs values",
            ),
            (
                r#"{"name": "a", "kind": "yes-no", "values": [{"value": "x"}]}"#,
                "takes no list",
            ),
            (
                r#"{"name": "a", "kind": "one", "values": [{"value": "x"}, {"value": "x"}]}"#,
                "listed twice",
            ),
            (
                r#"{"name": "a", "kind": "one", "values": [{"value": "x", "key": 0}]}"#,
                "not 1-9",
            ),
            (
                r#"{"name": "a", "kind": "one", "values": [{"value": "x", "key": 2}, {"value": "y", "key": 2}]}"#,
                "two values",
            ),
            (
                r#"{"name": "a", "kind": "several", "values": [{"value": "x;y"}]}"#,
                "may not hold ';'",
            ),
        ];
        for (var, want) in cases {
            let b: Codebook =
                serde_json::from_str(&format!(r#"{{"variables": [{var}]}}"#)).unwrap();
            let e = b.check().unwrap_err().to_string();
            assert!(e.contains("\"a\"") && e.contains(want), "{e}");
        }
        let twice: Codebook = serde_json::from_str(
            r#"{"variables": [{"name": "a", "kind": "note"}, {"name": "a", "kind": "note"}]}"#,
        )
        .unwrap();
        assert!(twice.check().unwrap_err().to_string().contains("twice"));
        // A misspelt key is refused by the reader, not read as absent.
        assert!(serde_json::from_str::<Codebook>(
            r#"{"variables": [{"name": "a", "kind": "note", "descripton": "x"}]}"#
        )
        .is_err());
    }

    #[test]
    fn cells_read_back_to_the_values_they_were_written_from() {
        let b = book();
        let v = |n: &str| b.variable(n).unwrap();
        let cases = [
            ("framing", t("half length")),
            (
                "motifs",
                CodeValue::Several(vec!["tree".into(), "river".into()]),
            ),
            ("motifs", CodeValue::Several(vec![])),
            ("signed", CodeValue::YesNo(false)),
            ("figures", CodeValue::Number(2.5)),
            ("figures", CodeValue::Number(12.0)),
            ("remarks", t("faded; re-mounted")),
        ];
        for (name, value) in cases {
            let cell = value.cell();
            assert_eq!(
                CodeValue::parse(v(name), &cell).unwrap(),
                Some(value.clone()),
                "{name} {cell:?}"
            );
        }
        // Several choices come back in the codebook's order, once each.
        assert_eq!(
            CodeValue::parse(v("motifs"), "river; tree;river").unwrap(),
            Some(CodeValue::Several(vec!["tree".into(), "river".into()]))
        );
        assert_eq!(CodeValue::parse(v("framing"), " ").unwrap(), None);
        let e = CodeValue::parse(v("framing"), "kneeling").unwrap_err();
        assert!(e.contains("\"kneeling\"") && e.contains("full length, half length, head only"));
        assert!(CodeValue::parse(v("signed"), "perhaps").is_err());
        assert!(CodeValue::parse(v("figures"), "two").is_err());
        assert!(CodeValue::parse(v("motifs"), "tree; sky").is_err());
    }

    #[test]
    fn several_choices_agree_in_any_order_and_defused_cells_read_back() {
        let a = CodeValue::Several(vec!["tree".into(), "river".into()]);
        let b = CodeValue::Several(vec!["river".into(), "tree".into()]);
        assert!(a.same(&b) && a != b);
        let time = "2026-12-01T10:00:00Z";
        let codes = vec![
            code("r1", "motifs", a, "ana", time),
            code("r1", "motifs", b, "ben", time),
        ];
        let coded = Coded::new(&codes);
        assert!(matches!(coded.outcome("motifs", "r1"), Outcome::Agreed(_)));
        assert!(disagreements(&book(), &coded, &["r1"]).is_empty());
        let bk = book();
        assert_eq!(
            CodeValue::parse(bk.variable("motifs").unwrap(), "'-").unwrap(),
            Some(CodeValue::Several(vec![]))
        );
        assert_eq!(
            CodeValue::parse(bk.variable("remarks").unwrap(), "'=faded").unwrap(),
            Some(t("=faded"))
        );
        // An apostrophe before plain text is the text's own.
        assert_eq!(
            CodeValue::parse(bk.variable("remarks").unwrap(), "'tis faded").unwrap(),
            Some(t("'tis faded"))
        );
    }

    #[test]
    fn times_order_with_and_without_fractions() {
        assert!(time_order("2026-12-05T10:00:41Z") < time_order("2026-12-05T10:00:41.123Z"));
        assert!(time_order("2026-12-05T10:00:41.9Z") < time_order("2026-12-05T10:00:42Z"));
        assert_eq!(time_order("2026-12-05 10:00:41Z"), None);
        assert_eq!(time_order("2026-12-05T10:00:41+01:00"), None);
        assert_eq!(time_order("yesterday"), None);
    }

    #[test]
    fn merging_keeps_every_coder_and_the_later_code_of_one_coder() {
        let mut a = vec![
            code(
                "r1",
                "framing",
                t("full length"),
                "ana",
                "2026-12-01T10:00:00Z",
            ),
            code(
                "r2",
                "framing",
                t("head only"),
                "ana",
                "2026-12-01T10:00:00Z",
            ),
        ];
        let b = vec![
            code(
                "r1",
                "framing",
                t("half length"),
                "ben",
                "2026-12-02T10:00:00Z",
            ),
            code(
                "r2",
                "framing",
                t("head only"),
                "ana",
                "2026-12-03T10:00:00Z",
            ),
            code(
                "r1",
                "framing",
                t("half length"),
                "ana",
                "2026-12-03T10:00:00Z",
            ),
        ];
        let r = merge_codes(&mut a, &b);
        assert_eq!(
            (r.added, r.same, r.replaced_by_later, r.kept_later),
            (1, 1, 1, 0)
        );
        assert_eq!(a.len(), 3);
        assert_eq!(a[0].value, t("half length"));
        // An older code of the same coder does not replace a newer one.
        let older = vec![code(
            "r1",
            "framing",
            t("head only"),
            "ana",
            "2026-11-01T10:00:00Z",
        )];
        let r = merge_codes(&mut a, &older);
        assert_eq!(r.kept_later, 1);
        assert_eq!(a[0].value, t("half length"));
    }

    #[test]
    fn a_cleared_code_does_not_come_back_from_an_older_file() {
        let old = code(
            "r1",
            "framing",
            t("half length"),
            "ana",
            "2026-12-01T10:00:00Z",
        );
        let clear = |time: &str| Cleared {
            item: "r1".into(),
            variable: "framing".into(),
            coder: "ana".into(),
            time: time.into(),
            settled: false,
        };
        // Here ana cleared it on the 2nd; her file of the 1st still has it.
        let (mut codes, mut cleared) = (vec![], vec![clear("2026-12-02T10:00:00Z")]);
        let r = merge_coding(&mut codes, &mut cleared, std::slice::from_ref(&old), &[]);
        assert_eq!((r.added, r.cleared_later), (0, 1), "left out, not added");
        assert!(codes.is_empty());
        assert_eq!(cleared.len(), 1);
        // The other way round: a file that cleared it later takes the code out here.
        let (mut codes, mut cleared) = (vec![old.clone()], vec![]);
        let r = merge_coding(
            &mut codes,
            &mut cleared,
            &[],
            &[clear("2026-12-02T10:00:00Z")],
        );
        assert_eq!(r.cleared_later, 1);
        assert!(codes.is_empty() && cleared.len() == 1);
        // Coded again after the clearing: the code stays and the clearing goes.
        let again = code(
            "r1",
            "framing",
            t("head only"),
            "ana",
            "2026-12-03T10:00:00Z",
        );
        let r = merge_coding(&mut codes, &mut cleared, std::slice::from_ref(&again), &[]);
        assert_eq!((r.added, r.cleared_later), (1, 0));
        assert_eq!(codes, vec![again]);
        assert!(cleared.is_empty());
        // Another coder's code of the same item is not touched by ana's clearing.
        let ben = code(
            "r1",
            "framing",
            t("half length"),
            "ben",
            "2026-12-01T10:00:00Z",
        );
        let mut cleared = vec![clear("2026-12-04T10:00:00Z")];
        let mut codes = vec![];
        merge_coding(&mut codes, &mut cleared, std::slice::from_ref(&ben), &[]);
        assert_eq!(codes, vec![ben]);
        assert!(
            check_cleared(&[clear("2026-12-04T10:00:00Z"), clear("2026-12-05T10:00:00Z")])
                .unwrap_err()
                .to_string()
                .contains("cleared 2 of 2 (item \"r1\"): listed twice")
        );
    }

    #[test]
    fn codebooks_merge_only_when_their_shared_variables_match() {
        let a = book();
        let mut b = book();
        b.variables[0].values[2].description = "another wording".into();
        b.variables.push(Variable {
            name: "colour".into(),
            kind: Kind::YesNo,
            description: String::new(),
            values: vec![],
        });
        let m = merge_codebooks(&a, &b).unwrap();
        assert_eq!(m.variables.len(), 6);
        assert_eq!(m.variables[0], a.variables[0]);
        b.variables[0].values.push(ValueDef {
            value: "kneeling".into(),
            key: None,
            description: String::new(),
        });
        let e = merge_codebooks(&a, &b).unwrap_err();
        assert!(
            e.contains("framing") && e.contains("only the second has \"kneeling\""),
            "{e}"
        );
        b.variables[0].kind = Kind::Several;
        assert!(merge_codebooks(&a, &b).unwrap_err().contains("one choice"));
    }

    #[test]
    fn outcomes_agreement_and_disagreements_follow_the_codes() {
        let b = book();
        let time = "2026-12-01T10:00:00Z";
        let mut codes = vec![
            code("r1", "framing", t("full length"), "ana", time),
            code("r1", "framing", t("full length"), "ben", time),
            code("r2", "framing", t("head only"), "ana", time),
            code("r2", "framing", t("half length"), "ben", time),
            code("r3", "framing", t("half length"), "ana", time),
            code(
                "r1",
                "motifs",
                CodeValue::Several(vec!["tree".into()]),
                "ana",
                time,
            ),
            code(
                "r1",
                "motifs",
                CodeValue::Several(vec!["tree".into()]),
                "ben",
                time,
            ),
        ];
        assert!(check_codes(&b, &codes).is_empty());
        let items = ["r1", "r2", "r3", "r4"];
        {
            let coded = Coded::new(&codes);
            assert_eq!(
                coded.outcome("framing", "r1"),
                Outcome::Agreed(t("full length"))
            );
            assert_eq!(coded.outcome("framing", "r2"), Outcome::Disagreed);
            assert_eq!(
                coded.outcome("framing", "r3"),
                Outcome::One(t("half length"))
            );
            assert_eq!(coded.outcome("framing", "r4"), Outcome::Uncoded);
            let rows = agreement_table(&b, &coded, &items);
            let framing = &rows[0];
            assert_eq!((framing.coders, framing.items_compared), (2, 2));
            assert_eq!(framing.percent_agreement, Some(0.5));
            // Two rows for the several-choice variable, none for the note.
            assert_eq!(rows.len(), 1 + 2 + 1 + 1);
            assert_eq!(rows[1].value, "tree");
            let d = disagreements(&b, &coded, &items);
            assert_eq!(d.len(), 1);
            assert_eq!(d[0].item, "r2");
            assert_eq!(
                d[0].values,
                vec![Some(t("head only")), Some(t("half length"))]
            );
            assert_eq!(progress(&b, &coded, &items)["framing"], 2);
        }
        // Settling keeps the originals and gives the item its value.
        codes.push(Code {
            settled: true,
            ..code(
                "r2",
                "framing",
                t("head only"),
                "cy",
                "2026-12-02T10:00:00Z",
            )
        });
        let coded = Coded::new(&codes);
        assert_eq!(coded.coders, vec!["ana", "ben"]);
        assert_eq!(
            coded.outcome("framing", "r2"),
            Outcome::Settled(t("head only"))
        );
        let d = disagreements(&b, &coded, &items);
        assert_eq!(d[0].settled, Some(t("head only")));
        assert_eq!(progress(&b, &coded, &items)["framing"], 3);
    }

    #[test]
    fn codes_that_no_longer_fit_are_reported_and_can_be_recoded() {
        let mut b = book();
        let time = "2026-12-01T10:00:00Z";
        let mut codes = vec![
            code("r1", "framing", t("head only"), "ana", time),
            code(
                "r1",
                "motifs",
                CodeValue::Several(vec!["tree".into(), "river".into()]),
                "ana",
                time,
            ),
            code("r1", "signed", CodeValue::Number(1.0), "ana", time),
            code("r1", "gone", CodeValue::YesNo(true), "ana", time),
        ];
        // The user renamed "head only" to "head" and "river" to "water".
        b.variables[0].values[2].value = "head".into();
        b.variables[1].values[1].value = "water".into();
        let m = check_codes(&b, &codes);
        assert_eq!(
            m.iter().map(|m| m.code).collect::<Vec<_>>(),
            vec![0, 1, 2, 3]
        );
        let text = describe_misfits(&codes, &m);
        assert!(text.starts_with("4 codes do not fit"), "{text}");
        assert!(text.contains("no variable \"gone\""), "{text}");
        assert_eq!(recode(&mut codes, "framing", "head only", "head"), 1);
        assert_eq!(recode(&mut codes, "motifs", "river", "water"), 1);
        assert_eq!(
            check_codes(&b, &codes)
                .iter()
                .map(|m| m.code)
                .collect::<Vec<_>>(),
            vec![2, 3]
        );
    }

    #[test]
    fn the_form_of_codes_is_checked_code_by_code() {
        let time = "2026-12-01T10:00:00Z";
        let ok = vec![code("r1", "framing", t("head only"), "ana", time)];
        assert!(check_form(&ok).is_ok());
        let mut twice = ok.clone();
        twice.push(code("r1", "framing", t("full length"), "ana", time));
        assert!(check_form(&twice)
            .unwrap_err()
            .to_string()
            .contains("code 2 of 2"));
        let bad_time = vec![code("r1", "framing", t("head only"), "ana", "5 Dec")];
        assert!(check_form(&bad_time)
            .unwrap_err()
            .to_string()
            .contains("\"5 Dec\""));
        let nobody = vec![code("r1", "framing", t("head only"), " ", time)];
        assert!(check_form(&nobody).is_err());
    }
}
