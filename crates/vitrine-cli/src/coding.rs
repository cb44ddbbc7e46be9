//! `vitrine corpus`'s coding side: codebooks read from files, codes imported from a spreadsheet,
//! coders' corpus files merged, and the agreement, disagreement and code tables written as CSV.

use std::collections::BTreeSet;
use std::path::Path;

use anyhow::{bail, Context, Result};
use serde::Deserialize;
use vitrine_corpus::coding::{
    check_codes, describe_misfits, merge_codebooks, merge_coding, recode, set_codes, Cleared, Code,
    CodeValue, Codebook,
};
use vitrine_corpus::corpus::CorpusFile;

/// A codebook from a file: `{"variables": [...]}`, or a corpus file's codebook.
pub fn read_codebook(p: &Path) -> Result<Codebook> {
    let text = std::fs::read_to_string(p).with_context(|| format!("reading {}", p.display()))?;
    let v: serde_json::Value =
        serde_json::from_str(&text).with_context(|| format!("{}: not valid JSON", p.display()))?;
    let book = if v.get("format").is_some() {
        CorpusFile::from_json(&text)
            .with_context(|| format!("{}", p.display()))?
            .codebook
    } else {
        let book = Codebook::deserialize(&v)
            .map_err(|e| anyhow::anyhow!("{}: codebook: {e}", p.display()))?;
        book.check().with_context(|| format!("{}", p.display()))?;
        book
    };
    if book.is_empty() {
        bail!("{}: the codebook has no variables", p.display());
    }
    Ok(book)
}

/// "VARIABLE:OLD=NEW" of `--recode`.
pub fn parse_recode(s: &str) -> Result<(String, String, String)> {
    let bad = || format!("--recode {s:?}: give VARIABLE:OLD=NEW");
    let (var, rest) = s.split_once(':').with_context(bad)?;
    let (old, new) = rest.split_once('=').with_context(bad)?;
    let (var, old, new) = (var.trim(), old.trim(), new.trim());
    if var.is_empty() || old.is_empty() || new.is_empty() {
        bail!(bad());
    }
    Ok((var.into(), old.into(), new.into()))
}

/// Applies `--recode`s, checking that each names a variable and value that exist.
pub fn apply_recodes(
    book: &Codebook,
    codes: &mut [Code],
    recodes: &[String],
) -> Result<Vec<String>> {
    let mut notes = Vec::new();
    for r in recodes {
        let (var, old, new) = parse_recode(r)?;
        let v = book
            .variable(&var)
            .with_context(|| format!("--recode {r:?}: the codebook has no variable {var:?}"))?;
        if v.value_index(&new).is_none() {
            let listed: Vec<&str> = v.values.iter().map(|d| d.value.as_str()).collect();
            bail!(
                "--recode {r:?}: {new:?} is not a value of {var:?} in the codebook (its values: {})",
                listed.join(", ")
            );
        }
        let n = recode(codes, &var, &old, &new);
        if n == 0 {
            bail!("--recode {r:?}: no code of {var:?} has the value {old:?}");
        }
        notes.push(format!(
            "{n} codes of {var:?} changed from {old:?} to {new:?}"
        ));
    }
    Ok(notes)
}

/// Refuses codes that do not fit the codebook, naming them and the ways out.
pub fn require_fit(book: &Codebook, codes: &[Code]) -> Result<()> {
    let misfits = check_codes(book, codes);
    if !misfits.is_empty() {
        bail!(
            "{}\nNothing was written. Add the values or variables to the codebook (--codebook FILE), \
             or rename values in the codes (--recode VARIABLE:OLD=NEW).",
            describe_misfits(codes, &misfits)
        );
    }
    Ok(())
}

/// Merges other coders' corpus files into `book` and `codes`.
pub fn merge_files(
    book: &mut Codebook,
    codes: &mut Vec<Code>,
    cleared: &mut Vec<Cleared>,
    files: &[std::path::PathBuf],
    manifest_sha: &str,
    notes: &mut Vec<String>,
) -> Result<()> {
    for p in files {
        let text =
            std::fs::read_to_string(p).with_context(|| format!("reading {}", p.display()))?;
        let other = CorpusFile::from_json(&text).with_context(|| format!("{}", p.display()))?;
        *book = merge_codebooks(book, &other.codebook).map_err(|why| {
            anyhow::anyhow!(
                "--merge {}: its codebook does not match: {why}. Make the codebooks agree \
                 (--codebook FILE, --recode VARIABLE:OLD=NEW) before merging; nothing was written.",
                p.display()
            )
        })?;
        if other.atlas.manifest_sha256 != manifest_sha {
            notes.push(format!(
                "{} was made on another atlas or build ({:?})",
                p.display(),
                other.atlas.title
            ));
        }
        let r = merge_coding(codes, cleared, &other.codes, &other.cleared);
        let mut line = format!(
            "merged {}: {} codes added, {} already here",
            p.display(),
            r.added,
            r.same
        );
        if r.replaced_by_later + r.kept_later > 0 {
            line.push_str(&format!(
                "; {} codes where one coder coded an item twice differently: the later kept",
                r.replaced_by_later + r.kept_later
            ));
        }
        if r.cleared_later > 0 {
            line.push_str(&format!(
                "; {} codes left out: their coder cleared them later",
                r.cleared_later
            ));
        }
        notes.push(line);
    }
    Ok(())
}

/// Reads codes from a CSV: the id column (named as the catalogue's id column, or "id"), and a
/// column per variable (named as in the codebook). Other columns (catalogue fields, one coder's
/// column of an export) are passed over and named in a note; empty cells are not codes.
/// Rows whose id is not in the atlas are listed in a note and not read.
#[allow(clippy::too_many_arguments)]
pub fn import_codes(
    p: &Path,
    book: &Codebook,
    id_col: &str,
    in_atlas: &dyn Fn(&str) -> bool,
    coder: &str,
    time: &str,
    settled: bool,
    notes: &mut Vec<String>,
) -> Result<Vec<Code>> {
    let mut rd = csv::ReaderBuilder::new()
        .flexible(false)
        .from_path(p)
        .with_context(|| format!("reading {}", p.display()))?;
    let headers = rd
        .headers()
        .with_context(|| format!("{}: the header row", p.display()))?
        .clone();
    let names: Vec<&str> = headers
        .iter()
        .map(|h| h.trim_start_matches('\u{feff}'))
        .collect();
    let id_at = names
        .iter()
        .position(|h| *h == id_col)
        .or_else(|| names.iter().position(|h| *h == "id"))
        .with_context(|| {
            format!(
                "{}: no id column (a column named {id_col:?} or \"id\")",
                p.display()
            )
        })?;
    let mut read: Vec<(usize, &vitrine_corpus::coding::Variable)> = Vec::new();
    let mut passed = Vec::new();
    for (k, h) in names.iter().enumerate() {
        if k == id_at {
            continue;
        }
        // "framing (code)" is the variable of an export whose catalogue has a field "framing":
        // then the plain "framing" column is the catalogue's, not codes.
        let coded_apart = names.contains(&format!("{h} (code)").as_str());
        let plain = h.strip_suffix(" (code)").unwrap_or(h);
        match book.variable(plain) {
            Some(v) if !coded_apart => read.push((k, v)),
            _ => passed.push(h.to_string()),
        }
    }
    if read.is_empty() {
        let vars: Vec<&str> = book.variables.iter().map(|v| v.name.as_str()).collect();
        bail!(
            "{}: no column is named as a codebook variable ({})",
            p.display(),
            vars.join(", ")
        );
    }
    if !passed.is_empty() {
        notes.push(format!(
            "{}: columns not in the codebook passed over: {}",
            p.display(),
            passed.join(", ")
        ));
    }
    let mut out = Vec::new();
    let mut missing = Vec::new();
    let mut seen = BTreeSet::new();
    for (r, rec) in rd.records().enumerate() {
        let row = r + 2;
        let rec = rec.with_context(|| format!("{}: row {row}", p.display()))?;
        let id = rec.get(id_at).unwrap_or("").trim();
        if id.is_empty() {
            bail!("{}: row {row} has no id", p.display());
        }
        if !in_atlas(id) {
            missing.push(id.to_string());
            continue;
        }
        if !seen.insert(id.to_string()) {
            bail!("{}: row {row}: item {id:?} has a row already", p.display());
        }
        for (k, var) in &read {
            let text = rec.get(*k).unwrap_or("");
            let value = CodeValue::parse(var, text).map_err(|why| {
                anyhow::anyhow!(
                    "{}: row {row}, column {:?} (item {id:?}): {why}",
                    p.display(),
                    names[*k]
                )
            })?;
            if let Some(value) = value {
                out.push(Code {
                    item: id.to_string(),
                    variable: var.name.clone(),
                    value,
                    coder: coder.to_string(),
                    time: time.to_string(),
                    settled,
                });
            }
        }
    }
    if !missing.is_empty() {
        notes.push(format!(
            "{}: {} rows name items that are not in this atlas and were not read: {}",
            p.display(),
            missing.len(),
            first_few(&missing)
        ));
    }
    Ok(out)
}

/// Up to five names and how many more.
pub fn first_few(names: &[String]) -> String {
    let mut s = names
        .iter()
        .take(5)
        .map(|n| format!("{n:?}"))
        .collect::<Vec<_>>()
        .join(", ");
    if names.len() > 5 {
        s.push_str(&format!(" and {} more", names.len() - 5));
    }
    s
}

/// Adds `new` codes (imported) to `codes`, saying what it did.
/// Codes read now are this coder's word: a clearing of the same key (from an earlier file) goes.
pub fn put_codes(
    codes: &mut Vec<Code>,
    cleared: &mut Vec<Cleared>,
    new: Vec<Code>,
    from: &Path,
    notes: &mut Vec<String>,
) {
    let n = new.len();
    let keys: std::collections::HashSet<_> = new.iter().map(Code::owned_key).collect();
    cleared.retain(|c| !keys.contains(&c.owned_key()));
    let replaced = set_codes(codes, new);
    notes.push(format!(
        "{}: {n} codes read ({replaced} of them replaced this coder's earlier codes)",
        from.display()
    ));
}

/// Notes on codes of items the atlas or the corpus lacks: they stay in the corpus file and are
/// left out of the tables.
pub fn note_outside(
    codes: &[Code],
    in_atlas: &dyn Fn(&str) -> bool,
    in_corpus: &dyn Fn(&str) -> bool,
    notes: &mut Vec<String>,
) {
    let mut gone: BTreeSet<&str> = BTreeSet::new();
    let mut outside: BTreeSet<&str> = BTreeSet::new();
    for c in codes {
        if !in_atlas(&c.item) {
            gone.insert(&c.item);
        } else if !in_corpus(&c.item) {
            outside.insert(&c.item);
        }
    }
    if !gone.is_empty() {
        let names: Vec<String> = gone.iter().map(|s| s.to_string()).collect();
        notes.push(format!(
            "codes of {} items that are not in this atlas are kept in the corpus file and left out of the tables: {}",
            names.len(),
            first_few(&names)
        ));
    }
    if !outside.is_empty() {
        notes.push(format!(
            "codes of {} items outside this corpus are kept in the corpus file and left out of the tables",
            outside.len()
        ));
    }
}
