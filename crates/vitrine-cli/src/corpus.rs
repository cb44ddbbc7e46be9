//! `vitrine corpus`: a corpus rebuilt without a browser, from an atlas and a corpus file or a
//! selection given on the command line, written as CSV, JSON (the corpus file) and IIIF.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};
use clap::Args;
use vitrine_corpus::coding::{code_columns, Coded};
use vitrine_corpus::columns::{decode_fields, Column};
use vitrine_corpus::corpus::{
    corpus_mask, describe, AtlasRef, CorpusFile, Lookup, Made, Op, Shape, Step, CORPUS_FORMAT,
    CORPUS_VERSION,
};
use vitrine_corpus::export::{build_record, csv, id_column, iiif_manifest, CsvStyle, IiifOptions};
use vitrine_corpus::filter::{DateRule, Filter};
use vitrine_corpus::polygon::Polygon;
use vitrine_format::ArrayRef;

use vitrine_build::read::Atlas;

use crate::{coding, measure};

/// Rebuild a corpus without a browser: from a corpus file (saved in the viewer) and/or a
/// selection given here, write its catalogue rows (CSV), its corpus file (JSON: the ids and
/// how they were chosen) and an IIIF Presentation 3 Manifest. The corpus is the selected items
/// that pass every filter; with nothing selected, every item that passes them.
#[derive(Args, Default)]
pub struct CorpusArgs {
    /// The atlas folder.
    pub atlas: PathBuf,
    /// A corpus file to start from (its map, steps and filters; flags below add to them).
    #[arg(long)]
    pub from: Option<PathBuf>,
    /// The map the lassos and rectangles are in (default: the corpus file's, else the first).
    #[arg(long)]
    pub map: Option<String>,
    /// Add the items inside a lasso, "x1,y1 x2,y2 ..." in map coordinates (even-odd rule for
    /// outlines that cross themselves). Repeatable.
    #[arg(long = "lasso", allow_hyphen_values = true)]
    pub lassos: Vec<String>,
    /// Remove the items inside a lasso (from every item when nothing else is selected). Repeatable.
    #[arg(long = "subtract-lasso", allow_hyphen_values = true)]
    pub subtract: Vec<String>,
    /// Add the items inside a rectangle "x0,y0,x1,y1" in map coordinates. Repeatable.
    #[arg(long = "rect", allow_hyphen_values = true)]
    pub rects: Vec<String>,
    /// Add items by id, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub ids: Vec<String>,
    /// Keep items whose category FIELD has VALUE: FIELD=VALUE. Repeat for more values of one
    /// field (any of them) or other fields (all of them).
    #[arg(long = "filter")]
    pub filters: Vec<String>,
    /// Keep items whose number FIELD lies in MIN..MAX (either may be left out): FIELD=MIN..MAX.
    #[arg(long = "range", allow_hyphen_values = true)]
    pub ranges: Vec<String>,
    /// Keep items dated in FROM..TO years: [FIELD=]FROM..TO (the field may be left out when the
    /// catalogue has one date field).
    #[arg(long = "date", allow_hyphen_values = true)]
    pub dates: Vec<String>,
    /// How --date treats an item's dating range: overlap (shares a year) or within (inside).
    #[arg(long = "date-rule", default_value = "overlap")]
    pub date_rule: Option<String>,
    /// Keep items where every word occurs (ignoring case and accents) in --search-in's fields.
    #[arg(long)]
    pub search: Option<String>,
    /// The fields --search looks in, comma-separated (default: every text and category field).
    #[arg(long = "search-in", value_delimiter = ',')]
    pub search_in: Vec<String>,
    /// Write the corpus's catalogue rows here (CSV, the id column first).
    #[arg(long)]
    pub csv: Option<PathBuf>,
    /// Write --csv's cells exactly as catalogued, for scripts. Without it, a cell a spreadsheet
    /// would run as a formula (it begins with = + - @, a tab or a CR) gets a leading apostrophe;
    /// plain numbers in number and date fields stay as they are.
    #[arg(long = "csv-exact", requires = "csv")]
    pub csv_exact: bool,
    /// Write the corpus file here (JSON: ids, steps, filters, atlas hash, build parameters, time).
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Write an IIIF Presentation 3 Manifest here, one Canvas per item.
    #[arg(long)]
    pub iiif: Option<PathBuf>,
    /// Where the IIIF Manifest will be published (its ids are made under this address).
    #[arg(long = "base-url")]
    pub base_url: Option<String>,
    /// The codebook to code against: a JSON file `{"variables": [...]}` (docs/corpus-file.md)
    /// or another corpus file (its codebook). Replaces the --from file's; codes that do not fit
    /// it are refused, named one by one (see --recode).
    #[arg(long)]
    pub codebook: Option<PathBuf>,
    /// Read codes from a CSV: the id column and a column per codebook variable (a --csv export
    /// filled in a spreadsheet will do); empty cells are not codes. Needs --coder.
    #[arg(long, requires = "coder")]
    pub codes: Option<PathBuf>,
    /// Read settled values from a CSV of the same form: each is kept beside the coders' own
    /// codes and becomes the item's value. Needs --coder (who settled them).
    #[arg(long, requires = "coder")]
    pub settle: Option<PathBuf>,
    /// Whose codes --codes reads, or who settled --settle's values.
    #[arg(long)]
    pub coder: Option<String>,
    /// Rename a value in the codes, VARIABLE:OLD=NEW (after it was renamed in the codebook).
    /// Repeatable.
    #[arg(long = "recode")]
    pub recodes: Vec<String>,
    /// Merge another coder's corpus file: its codes join these (its codebook must match).
    /// Repeatable.
    #[arg(long = "merge")]
    pub merges: Vec<PathBuf>,
    /// Write the agreement between coders, per variable, over the corpus's items (CSV).
    #[arg(long)]
    pub agreement: Option<PathBuf>,
    /// Write every item the coders disagree on, each coder's value and the settled one (CSV).
    #[arg(long)]
    pub disagreements: Option<PathBuf>,
    /// Write every code, one row each: id, variable, value, coder, time, settled (CSV).
    #[arg(long = "codes-table")]
    pub codes_table: Option<PathBuf>,
    /// Write a time profile (CSV): weighted counts and shares per period with 95 % intervals,
    /// of the corpus within the collection (with --compare, of both corpora), of a codebook
    /// variable's values, or of a category field's values (--profile-of).
    #[arg(long)]
    pub profile: Option<PathBuf>,
    /// Write the time profile as an SVG chart.
    #[arg(long = "profile-svg")]
    pub profile_svg: Option<PathBuf>,
    /// What the profile counts: corpus (the default), a codebook variable, or a category field
    /// (write variable:NAME or field:NAME where a name is both).
    #[arg(long = "profile-of")]
    pub profile_of: Option<String>,
    /// Periods of this many years (default 25).
    #[arg(long)]
    pub bin: Option<i32>,
    /// Take a category field's values as the periods (in the time order of their items' dates)
    /// instead of periods of years.
    #[arg(long)]
    pub periods: Option<String>,
    /// Profile only the years FROM..TO (the periods start at FROM).
    #[arg(long, allow_hyphen_values = true)]
    pub years: Option<String>,
    /// The date field of the profile, when the catalogue has several.
    #[arg(long = "date-field")]
    pub date_field: Option<String>,
    /// A field's profile keeps its N commonest values and joins the rest (default 12).
    #[arg(long)]
    pub top: Option<usize>,
    /// Another corpus file (its ids) to compare this corpus with: --comparison writes the table,
    /// --profile overlays the two corpora.
    #[arg(long)]
    pub compare: Option<PathBuf>,
    /// Write the comparison (CSV): sizes and overlap, and per category field each value's count
    /// and share in both, their ratio, the adjusted residual and the chi-square test.
    #[arg(long)]
    pub comparison: Option<PathBuf>,
    /// The category fields to compare, comma-separated (default: every category field).
    #[arg(long = "compare-fields", value_delimiter = ',')]
    pub compare_fields: Vec<String>,
    #[command(flatten)]
    pub grow: crate::grow::GrowArgs,
    /// Replace output files that exist.
    #[arg(long)]
    pub force: bool,
    /// The time to record (RFC 3339); the clock's when None.
    #[arg(skip)]
    pub time: Option<String>,
}

/// What `vitrine corpus` found and wrote.
pub struct CorpusReport {
    pub count: usize,
    pub description: String,
    pub written: Vec<PathBuf>,
    pub notes: Vec<String>,
}

/// The civil date (year, month 1-12, day 1-31) of `days` since 1970-01-01, in the proleptic
/// Gregorian calendar (the days-from-civil algorithm, inverted). Shared by the corpus file's time
/// and the server's HTTP dates.
pub fn civil_date(days: i64) -> (i64, i64, i64) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1_460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    (yoe + era * 400 + i64::from(m <= 2), m, d)
}

/// UTC time of `secs` since 1970 as RFC 3339 ("2026-12-03T19:40:00Z").
pub fn rfc3339_utc(secs: u64) -> String {
    let rem = secs % 86_400;
    let (y, m, d) = civil_date((secs / 86_400) as i64);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem / 60 % 60,
        rem % 60
    )
}

fn parse_rect(s: &str) -> Result<[f64; 4]> {
    let v: Vec<f64> = s
        .split(',')
        .map(|x| x.trim().parse::<f64>())
        .collect::<Result<_, _>>()
        .ok()
        .filter(|v: &Vec<f64>| v.len() == 4 && v.iter().all(|x| x.is_finite()))
        .with_context(|| format!("--rect {s:?}: give x0,y0,x1,y1 (four finite numbers)"))?;
    Ok([v[0], v[1], v[2], v[3]])
}

fn split_field<'a>(flag: &str, s: &'a str) -> Result<(&'a str, &'a str)> {
    s.split_once('=')
        .filter(|(f, _)| !f.trim().is_empty())
        .map(|(f, v)| (f.trim(), v.trim()))
        .with_context(|| format!("{flag} {s:?}: give FIELD=VALUE"))
}

/// "a..b" (either side may be empty) or a single value.
fn parse_span<T: std::str::FromStr>(flag: &str, s: &str) -> Result<(Option<T>, Option<T>)> {
    let bad = || format!("{flag} {s:?}: give FROM..TO (either may be left out) or one value");
    let one = |x: &str| -> Result<Option<T>> {
        let x = x.trim();
        if x.is_empty() {
            Ok(None)
        } else {
            x.parse().map(Some).map_err(|_| anyhow::anyhow!(bad()))
        }
    };
    match s.split_once("..") {
        Some((a, b)) => Ok((one(a)?, one(b)?)),
        None => {
            let v = one(s)?;
            if v.is_none() {
                bail!(bad());
            }
            let w = one(s)?;
            Ok((v, w))
        }
    }
}

/// The filters the flags give, in the order given (category values of one field merged).
fn filters_from_args(a: &CorpusArgs, atlas: &Atlas) -> Result<Vec<Filter>> {
    let m = &atlas.manifest;
    let mut out: Vec<Filter> = Vec::new();
    for s in &a.filters {
        let (field, value) = split_field("--filter", s)?;
        let merged = out.iter_mut().find_map(|f| match f {
            Filter::Category { field: g, values } if g == field => Some(values),
            _ => None,
        });
        match merged {
            Some(values) => values.push(value.to_string()),
            None => out.push(Filter::Category {
                field: field.into(),
                values: vec![value.to_string()],
            }),
        }
    }
    for s in &a.ranges {
        let (field, span) = split_field("--range", s)?;
        let (min, max) = parse_span::<f64>("--range", span)?;
        out.push(Filter::Range {
            field: field.into(),
            min,
            max,
        });
    }
    let rule = match a.date_rule.as_deref() {
        None | Some("overlap") => DateRule::Overlap,
        Some("within") => DateRule::Within,
        Some(x) => bail!("--date-rule {x:?}: give overlap or within"),
    };
    for s in &a.dates {
        let (field, span) = match s.split_once('=') {
            Some((f, span)) => (f.trim().to_string(), span),
            None => {
                let dated: Vec<&str> = m
                    .fields
                    .iter()
                    .filter(|f| f.kind == vitrine_format::FieldKind::Date)
                    .map(|f| f.name.as_str())
                    .collect();
                match dated.as_slice() {
                    [one] => (one.to_string(), s.as_str()),
                    [] => bail!("--date {s:?}: the catalogue has no date field"),
                    many => bail!(
                        "--date {s:?}: the catalogue has several date fields ({}); write FIELD=FROM..TO",
                        many.join(", ")
                    ),
                }
            }
        };
        let (from, to) = parse_span::<i32>("--date", span)?;
        out.push(Filter::Date {
            field,
            from: from.unwrap_or(i32::MIN + 1),
            to: to.unwrap_or(i32::MAX),
            rule,
        });
    }
    if let Some(q) = &a.search {
        out.push(Filter::Text {
            fields: a.search_in.clone(),
            query: q.clone(),
        });
    }
    Ok(out)
}

/// The steps the flags give; `before` says whether steps come before them (from a corpus file).
fn steps_from_args(a: &CorpusArgs, before: bool) -> Result<Vec<Step>> {
    let mut steps = Vec::new();
    for s in &a.lassos {
        let p = Polygon::parse(s).with_context(|| format!("--lasso {s:?}"))?;
        steps.push(Step {
            op: Op::Add,
            shape: Shape::Lasso(p),
        });
    }
    for s in &a.rects {
        steps.push(Step {
            op: Op::Add,
            shape: Shape::Rect(parse_rect(s)?),
        });
    }
    if !a.ids.is_empty() {
        steps.push(Step {
            op: Op::Add,
            shape: Shape::Ids(a.ids.clone()),
        });
    }
    for s in &a.subtract {
        let p = Polygon::parse(s).with_context(|| format!("--subtract-lasso {s:?}"))?;
        if steps.is_empty() && !before {
            // Removing from nothing: start from every item.
            steps.push(Step {
                op: Op::Replace,
                shape: Shape::Everything(Default::default()),
            });
        }
        steps.push(Step {
            op: Op::Subtract,
            shape: Shape::Lasso(p),
        });
    }
    Ok(steps)
}

/// Refuses an output file inside the atlas folder, or one that exists unless `force`.
pub fn check_output(p: &Path, flag: &str, atlas_dir: &Path, force: bool) -> Result<()> {
    let parent = p
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    if let (Ok(pp), Ok(ap)) = (parent.canonicalize(), atlas_dir.canonicalize()) {
        if pp.starts_with(ap) {
            bail!(
                "{flag} {}: that is inside the atlas folder; write exports elsewhere",
                p.display()
            );
        }
    }
    if p.exists() && !force {
        bail!(
            "{flag} {}: the file exists (add --force to replace it)",
            p.display()
        );
    }
    Ok(())
}

/// Runs `vitrine corpus` and prints what it found and wrote.
pub fn run(a: CorpusArgs) -> Result<()> {
    let r = corpus(&a)?;
    println!("{} items: {}", r.count, r.description);
    for p in &r.written {
        eprintln!("wrote {}", p.display());
    }
    for n in &r.notes {
        eprintln!("note: {n}");
    }
    Ok(())
}

/// A corpus file replayed on its own atlas must give the items it lists.
fn check_listed(
    c: &CorpusFile,
    manifest_sha: &str,
    mask: &vitrine_corpus::mask::Mask,
    ids: &vitrine_format::TextTable,
) -> Result<()> {
    if c.atlas.manifest_sha256 != manifest_sha {
        return Ok(());
    }
    let listed: Vec<&str> = c.ids.iter().map(|s| s.as_str()).collect();
    let got: Vec<&str> = mask.items().map(|i| ids.get(i)).collect();
    if listed != got {
        bail!(
            "the corpus file lists {} items, but its steps and filters give {} on the same atlas",
            listed.len(),
            got.len()
        );
    }
    Ok(())
}

/// Makes the corpus `a` describes and writes the files it asks for.
pub fn corpus(a: &CorpusArgs) -> Result<CorpusReport> {
    let atlas_dir = a.atlas.as_path();
    let atlas = Atlas::open(atlas_dir)?;
    let m = &atlas.manifest;
    let n = m.item_count as usize;
    if m.maps.is_empty() {
        bail!("{}: the atlas has no map", atlas_dir.display());
    }
    for (p, flag) in [
        (&a.csv, "--csv"),
        (&a.json, "--json"),
        (&a.iiif, "--iiif"),
        (&a.agreement, "--agreement"),
        (&a.disagreements, "--disagreements"),
        (&a.codes_table, "--codes-table"),
        (&a.profile, "--profile"),
        (&a.profile_svg, "--profile-svg"),
        (&a.comparison, "--comparison"),
        (&a.grow.scores, "--scores"),
    ] {
        if let Some(p) = p {
            check_output(p, flag, atlas_dir, a.force)?;
        }
    }
    let manifest_sha = atlas.manifest_sha.clone();
    let mut notes = Vec::new();

    let from = match &a.from {
        Some(p) => {
            let text =
                std::fs::read_to_string(p).with_context(|| format!("reading {}", p.display()))?;
            Some(CorpusFile::from_json(&text).with_context(|| format!("{}", p.display()))?)
        }
        None => None,
    };
    let mut book = from
        .as_ref()
        .map(|c| c.codebook.clone())
        .unwrap_or_default();
    let mut codes = from.as_ref().map(|c| c.codes.clone()).unwrap_or_default();
    let mut cleared = from.as_ref().map(|c| c.cleared.clone()).unwrap_or_default();
    if let Some(p) = &a.codebook {
        book = coding::read_codebook(p)?;
    }
    coding::merge_files(
        &mut book,
        &mut codes,
        &mut cleared,
        &a.merges,
        &manifest_sha,
        &mut notes,
    )?;
    notes.extend(coding::apply_recodes(&book, &mut codes, &a.recodes)?);
    coding::require_fit(&book, &codes)?;
    let mut steps = from.as_ref().map(|c| c.steps.clone()).unwrap_or_default();
    let mut filters = from.as_ref().map(|c| c.filters.clone()).unwrap_or_default();
    let extra_steps = steps_from_args(a, !steps.is_empty())?;
    let extra_filters = filters_from_args(a, &atlas)?;
    let changed = !extra_steps.is_empty() || !extra_filters.is_empty();
    steps.extend(extra_steps);
    filters.extend(extra_filters);
    if let (Some(given), Some(c), Some(p)) = (&a.map, &from, &a.from) {
        let drawn = c
            .steps
            .iter()
            .any(|s| matches!(s.shape, Shape::Lasso(_) | Shape::Rect(_)));
        if given != &c.map && drawn {
            bail!(
                "--map {given:?}: the steps of {} were drawn on the {:?} map, and would pick other \
                 items on another (leave out --map, or give --map {:?})",
                p.display(),
                c.map,
                c.map
            );
        }
    }
    let (map_name, named_by) = match (&a.map, &from, &a.from) {
        (Some(name), _, _) => (name.clone(), "--map".to_string()),
        (None, Some(c), Some(p)) => (c.map.clone(), format!("{} (its \"map\")", p.display())),
        _ => (m.maps[0].name.clone(), "the atlas's first map".to_string()),
    };
    let map = m
        .maps
        .iter()
        .find(|l| l.name == map_name)
        .with_context(|| {
            let names: Vec<&str> = m.maps.iter().map(|l| l.name.as_str()).collect();
            format!(
                "{named_by} names the map {map_name:?}, but {} has the maps {}",
                atlas_dir.display(),
                names.join(", ")
            )
        })?;
    if let Some(c) = &from {
        if c.atlas.manifest_sha256 != manifest_sha {
            notes.push(format!(
                "the corpus file was made on another atlas or build ({:?}, manifest {}); its steps are replayed on this one",
                c.atlas.title,
                c.atlas.manifest_sha256.chars().take(12).collect::<String>()
            ));
        }
    }

    // The arrays the corpus needs: positions, ids, catalogue columns, sizes.
    let mut wanted: Vec<&ArrayRef> = vec![&map.positions, &m.ids, &m.ids_text];
    for f in &m.fields {
        wanted.push(&f.column);
        wanted.extend(f.column2.as_ref());
        if let Some([o, b]) = &f.written {
            wanted.push(o);
            wanted.push(b);
        }
        if let Some([o, c]) = &f.multi {
            wanted.push(o);
            wanted.push(c);
        }
    }
    if let Some(s) = &m.sheets {
        wanted.push(&s.extents);
        wanted.extend(s.image_sizes.as_ref());
    }
    let files = atlas.load(wanted)?;
    let positions = files.positions(map)?;
    let ids = files.ids(m)?;
    let cols = decode_fields(m, &files)?;
    let index: HashMap<&str, usize> = (0..n).map(|i| (ids.get(i), i)).collect();
    let index_of = |id: &str| index.get(id).copied();
    let at = Lookup {
        positions: &positions,
        index_of: &index_of,
        near: None,
        runs: None,
    };
    let mut mask = corpus_mask(&steps, &filters, &cols, &at)?;
    if let (Some(c), false) = (&from, changed) {
        check_listed(c, &manifest_sha, &mask, &ids)?;
    }
    // Growing: a new round (every mark so far, and these), trained on the atlas's compressed
    // vectors; its best candidates accepted into the corpus when asked.
    let mut rounds = from.as_ref().map(|c| c.grow.clone()).unwrap_or_default();
    if !a.grow.like.is_empty() || !a.grow.not.is_empty() {
        let next = a.grow.next_round(rounds.last())?;
        if next.like.is_empty() {
            bail!("--not: give the items \"like these\" with --like too");
        }
        rounds.push(next);
    }
    let mut grown = None;
    if a.grow.wanted() {
        let Some(round) = rounds.last() else {
            bail!("--scores, --accept-top: there is no round of growing (give --like, or --from a corpus file grown in the viewer)");
        };
        let q = crate::grow::read_q8(&atlas)?;
        let t = crate::grow::train(&q, round, &index_of)?;
        if let Some(k) = a.grow.accept_top {
            // Candidates: unmarked items not yet chosen by the steps (filters aside, as in the
            // viewer; with nothing chosen, every unmarked item is one).
            let chosen = if steps.is_empty() {
                None
            } else {
                Some(corpus_mask(&steps, &[], &cols, &at)?)
            };
            let top = vitrine_corpus::grow::candidates(
                &t.scores,
                &|i| {
                    chosen.as_ref().is_some_and(|m| m.get(i))
                        || t.mark.get(&i).is_some_and(|m| *m != "background")
                },
                k,
            );
            let accepted: Vec<String> = top.iter().map(|&i| ids.get(i).to_string()).collect();
            notes.push(format!(
                "accepted the {} best candidates of round {} into the corpus",
                accepted.len(),
                rounds.len()
            ));
            if !accepted.is_empty() {
                steps.push(Step {
                    op: Op::Add,
                    shape: Shape::Ids(accepted.clone()),
                });
                mask = corpus_mask(&steps, &filters, &cols, &at)?;
            }
            rounds.last_mut().unwrap().accepted.extend(accepted);
        }
        grown = Some(t);
    }
    let items: Vec<usize> = mask.items().collect();
    let description = describe(&map_name, &steps, &filters);
    let time = a.time.clone().unwrap_or_else(|| {
        let secs = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_secs())
            .unwrap_or(0);
        rfc3339_utc(secs)
    });

    // Codes: imported from spreadsheets, then checked and read over the corpus's items.
    let id_col = id_column(m);
    let in_atlas = |id: &str| index.contains_key(id);
    for (p, settled) in [(&a.codes, false), (&a.settle, true)] {
        if let Some(p) = p {
            if book.is_empty() {
                bail!(
                    "{}: there is no codebook to read codes against (give --codebook FILE)",
                    p.display()
                );
            }
            let coder = a.coder.as_deref().unwrap_or_default().trim();
            if coder.is_empty() {
                bail!("--coder: give the coder's name");
            }
            let new = coding::import_codes(
                p, &book, &id_col, &in_atlas, coder, &time, settled, &mut notes,
            )?;
            coding::put_codes(&mut codes, &mut cleared, new, p, &mut notes);
        }
    }
    let in_corpus = |id: &str| index.get(id).is_some_and(|&i| mask.get(i));
    coding::note_outside(&codes, &in_atlas, &in_corpus, &mut notes);
    let coded = Coded::new(&codes);
    let corpus_ids: Vec<&str> = items.iter().map(|&i| ids.get(i)).collect();
    for (p, flag) in [
        (&a.agreement, "--agreement"),
        (&a.disagreements, "--disagreements"),
        (&a.codes_table, "--codes-table"),
    ] {
        if p.is_some() && book.is_empty() {
            bail!("{flag}: the corpus has no codebook (give --codebook FILE, or --from a coded corpus file)");
        }
    }
    let file = CorpusFile {
        format: CORPUS_FORMAT.into(),
        format_version: CORPUS_VERSION,
        atlas: AtlasRef {
            title: m.title.clone(),
            manifest_sha256: manifest_sha.clone(),
            item_count: m.item_count,
        },
        build: build_record(m),
        map: map_name.clone(),
        steps: steps.clone(),
        filters: filters.clone(),
        count: items.len(),
        ids: items.iter().map(|&i| ids.get(i).to_string()).collect(),
        made: Made {
            tool: "vitrine".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            time,
            by: "vitrine corpus".into(),
        },
        codebook: book.clone(),
        codes: codes.clone(),
        cleared,
        grow: rounds,
    };
    let mut written = measure::measure(
        a,
        &measure::Made {
            m,
            ids: &ids,
            cols: &cols,
            items: &items,
            index: &index,
            book: &book,
            coded: &coded,
        },
        &mut notes,
    )?;
    if let Some(p) = &a.csv {
        let style = if a.csv_exact {
            CsvStyle::Exact
        } else {
            CsvStyle::Spreadsheet
        };
        let taken: Vec<&str> = cols.iter().map(|c| c.field.name.as_str()).collect();
        let cc = code_columns(&book, &coded, &taken);
        std::fs::write(p, csv(m, &ids, &cols, &items, style, Some((&cc, &coded))))
            .with_context(|| format!("writing {}", p.display()))?;
        written.push(p.clone());
    }
    let order: HashMap<&str, usize> = corpus_ids
        .iter()
        .enumerate()
        .map(|(k, i)| (*i, k))
        .collect();
    type Table<'t> = Box<dyn Fn() -> String + 't>;
    let tables: [(&Option<PathBuf>, Table); 3] = [
        (
            &a.agreement,
            Box::new(|| vitrine_corpus::coding::agreement_csv(&book, &coded, &corpus_ids)),
        ),
        (
            &a.disagreements,
            Box::new(|| {
                vitrine_corpus::coding::disagreements_csv(&book, &coded, &corpus_ids, &id_col)
            }),
        ),
        (
            &a.codes_table,
            Box::new(|| vitrine_corpus::coding::codes_csv(&codes, &order, &id_col)),
        ),
    ];
    for (p, text) in tables {
        if let Some(p) = p {
            std::fs::write(p, text()).with_context(|| format!("writing {}", p.display()))?;
            written.push(p.clone());
        }
    }
    if let (Some(p), Some(t)) = (&a.grow.scores, &grown) {
        let text = crate::grow::scores_csv(t, &|i| ids.get(i).to_string());
        std::fs::write(p, text).with_context(|| format!("writing {}", p.display()))?;
        written.push(p.clone());
    }
    if let Some(p) = &a.json {
        std::fs::write(p, file.to_json()).with_context(|| format!("writing {}", p.display()))?;
        written.push(p.clone());
    }
    if let Some(p) = &a.iiif {
        let base = match &a.base_url {
            Some(b) if b.starts_with("https://") || b.starts_with("http://") => {
                if b.ends_with('/') {
                    b.clone()
                } else {
                    format!("{b}/")
                }
            }
            Some(b) => bail!("--base-url {b:?}: give an http:// or https:// address"),
            None => {
                let b = format!("https://corpus.invalid/{}/", &manifest_sha[..16]);
                notes.push(format!(
                    "the IIIF ids are under {b} (a placeholder): give --base-url with the address where the manifest will be published"
                ));
                b
            }
        };
        let extents = files.extents(m)?.unwrap_or_default();
        let sizes = files.image_sizes(m)?;
        let summary = format!("{} items of {}: {description}", items.len(), m.title);
        let o = IiifOptions {
            base: &base,
            image_sizes: sizes.as_deref(),
            extents: &extents,
            summary: &summary,
        };
        let v = iiif_manifest(m, &ids, &cols, &items, &o);
        std::fs::write(p, serde_json::to_string_pretty(&v)?)
            .with_context(|| format!("writing {}", p.display()))?;
        written.push(p.clone());
        if !cols.iter().any(|c| {
            matches!(c.column, Column::Text(_)) && c.field.kind == vitrine_format::FieldKind::Link
        }) {
            notes.push(
                "the catalogue has no link field: the IIIF canvases carry metadata but no image"
                    .into(),
            );
        }
    }
    Ok(CorpusReport {
        count: items.len(),
        description,
        written,
        notes,
    })
}
