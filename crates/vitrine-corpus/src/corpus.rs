//! A corpus: selection steps on one map, the active filters, and the file that records them.

use serde::{Deserialize, Serialize};

use crate::coding::{check_cleared, check_form, Cleared, Code, Codebook};
use crate::columns::FieldColumn;
use crate::filter::{apply, Filter};
use crate::mask::Mask;
use crate::polygon::{items_inside, Polygon};
use crate::CorpusError;

/// What a step does with the items its shape covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Op {
    /// The selection becomes these items.
    Replace,
    /// These items join the selection.
    Add,
    /// These items leave the selection.
    Subtract,
}

/// The items a step covers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Shape {
    /// A freehand outline in map coordinates (even-odd rule, see [`crate::polygon`]).
    Lasso(Polygon),
    /// [x0, y0, x1, y1] in map coordinates.
    Rect([f64; 4]),
    /// Items by id (picked one by one).
    Ids(Vec<String>),
    /// Every item (the filters still narrow the corpus): "select all that match".
    Everything(Everything),
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct Everything {}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Step {
    pub op: Op,
    #[serde(flatten)]
    pub shape: Shape,
}

/// What replaying needs of the atlas.
pub struct Lookup<'a> {
    /// Positions on the map the steps were drawn on.
    pub positions: &'a [[f32; 2]],
    /// The item index of an id.
    pub index_of: &'a dyn Fn(&str) -> Option<usize>,
    /// Items near a map rectangle (a superset of those inside it, in any order), when a spatial
    /// index can say (else every item is tested).
    pub near: Option<&'a dyn Fn([f64; 4]) -> Vec<u32>>,
    /// A tiled atlas: for an outline, the runs of items wholly inside it (their leaves' squares
    /// are) and the items to test one by one (those of the leaves it crosses).
    pub runs: Option<&'a Runs<'a>>,
}

/// See [`Lookup::runs`].
pub type Runs<'a> = dyn Fn(&Polygon) -> (Vec<[u64; 2]>, Vec<u32>) + 'a;

/// The items a shape covers.
pub fn covered(shape: &Shape, at: &Lookup) -> Result<Mask, CorpusError> {
    let n = at.positions.len();
    let inside = |p: &Polygon| {
        if let Some(runs) = at.runs {
            let (whole, near) = runs(p);
            let mut m = Mask::from_items(n, items_inside(at.positions, p, Some(&near)));
            for [a, b] in whole {
                m.set_range(a as usize, b as usize);
            }
            return m;
        }
        let near = at.near.map(|f| f(p.bbox()));
        Mask::from_items(n, items_inside(at.positions, p, near.as_deref()))
    };
    Ok(match shape {
        Shape::Lasso(p) => {
            p.check()?;
            inside(p)
        }
        Shape::Rect(r) => inside(&Polygon::rect(*r)),
        Shape::Ids(ids) => {
            let mut m = Mask::none(n);
            for id in ids {
                let i = (at.index_of)(id).ok_or_else(|| {
                    CorpusError::Invalid(format!("item {id:?} is not in this atlas"))
                })?;
                m.set(i, true);
            }
            m
        }
        Shape::Everything(_) => Mask::all(n),
    })
}

/// The selection the steps make, or None when there are none (nothing chosen by hand).
pub fn replay(steps: &[Step], at: &Lookup) -> Result<Option<Mask>, CorpusError> {
    if steps.is_empty() {
        return Ok(None);
    }
    let n = at.positions.len();
    let mut sel = Mask::none(n);
    for s in steps {
        let m = covered(&s.shape, at)?;
        match s.op {
            Op::Replace => sel = m,
            Op::Add => sel.or(&m),
            Op::Subtract => sel.subtract(&m),
        }
    }
    Ok(Some(sel))
}

/// The corpus: the selection narrowed by the filters; with no selection, what the filters leave.
pub fn corpus_mask(
    steps: &[Step],
    filters: &[Filter],
    cols: &[FieldColumn],
    at: &Lookup,
) -> Result<Mask, CorpusError> {
    let n = at.positions.len();
    let mut m = apply(filters, cols, n)?.all;
    if let Some(sel) = replay(steps, at)? {
        m.and(&sel);
    }
    Ok(m)
}

pub const CORPUS_FORMAT: &str = "vitrine-corpus";
/// The version written; readers also take version 1 (before codebooks and codes).
pub const CORPUS_VERSION: u32 = 2;

/// The atlas a corpus was drawn from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AtlasRef {
    pub title: String,
    /// SHA-256 of the atlas's `atlas.json` bytes: another value means another atlas (or another
    /// build of it), on which the steps may pick other items.
    pub manifest_sha256: String,
    pub item_count: u64,
}

/// Who made the corpus file, and when.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Made {
    pub tool: String,
    pub tool_version: String,
    /// UTC, RFC 3339.
    pub time: String,
    /// "viewer" or "vitrine corpus".
    pub by: String,
}

/// The corpus file: enough to rebuild the corpus (steps, map, filters) and to check it (the ids
/// it gave). It is also the JSON export: the ids with the record of how they were chosen.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CorpusFile {
    pub format: String,
    pub format_version: u32,
    pub atlas: AtlasRef,
    /// The build's parameters and seed, as the atlas records them.
    pub build: serde_json::Value,
    /// The map the lassos and rectangles were drawn on.
    pub map: String,
    pub steps: Vec<Step>,
    pub filters: Vec<Filter>,
    pub count: usize,
    /// The corpus's items by id, in atlas order.
    pub ids: Vec<String>,
    pub made: Made,
    /// The variables the corpus is coded against (version 2; empty when nobody coded).
    #[serde(default, skip_serializing_if = "Codebook::is_empty")]
    pub codebook: Codebook,
    /// Every coder's codes, settled values beside them (version 2).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub codes: Vec<Code>,
    /// Codes their coders took back, and when (version 2): a merge does not bring them back.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub cleared: Vec<Cleared>,
    /// Rounds of growing the corpus from examples (marks, settings, what was accepted), in order.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub grow: Vec<crate::grow::Round>,
}

impl CorpusFile {
    pub fn from_json(text: &str) -> Result<CorpusFile, CorpusError> {
        let v: serde_json::Value =
            serde_json::from_str(text).map_err(|e| CorpusError::Json(e.to_string()))?;
        let format = v.get("format").and_then(|f| f.as_str()).unwrap_or("");
        if format != CORPUS_FORMAT {
            return Err(CorpusError::Invalid(format!(
                "not a Vitrine corpus file (format = {format:?})"
            )));
        }
        let version = v.get("format_version").and_then(|f| f.as_u64());
        if !matches!(version, Some(1) | Some(2)) {
            return Err(CorpusError::Invalid(format!(
                "corpus format version {version:?} is not supported (this reader knows 1 and {CORPUS_VERSION})"
            )));
        }
        // Read whole; when that fails, read the steps and filters one by one to name the one at
        // fault. Lassos are checked (at least three vertices, finite) step by step.
        let named = |key: &str, what: &str, read: &dyn Fn(&serde_json::Value) -> Option<String>| {
            let list = v.get(key).and_then(|l| l.as_array())?;
            list.iter().enumerate().find_map(|(k, item)| {
                read(item).map(|e| format!("{what} {} of {}: {e}", k + 1, list.len()))
            })
        };
        let c = match CorpusFile::deserialize(&v) {
            Ok(c) => c,
            Err(e) => {
                let culprit = named("steps", "step", &|i| {
                    Step::deserialize(i).err().map(|e| e.to_string())
                })
                .or_else(|| {
                    named("filters", "filter", &|i| {
                        Filter::deserialize(i).err().map(|e| e.to_string())
                    })
                })
                .or_else(|| {
                    named("codes", "code", &|i| {
                        Code::deserialize(i).err().map(|e| e.to_string())
                    })
                })
                .or_else(|| {
                    named("cleared", "cleared", &|i| {
                        Cleared::deserialize(i).err().map(|e| e.to_string())
                    })
                })
                .or_else(|| {
                    let cb = v.get("codebook")?;
                    Codebook::deserialize(cb)
                        .err()
                        .map(|e| format!("codebook: {e}"))
                });
                return Err(match culprit {
                    Some(why) => CorpusError::Invalid(why),
                    None => CorpusError::Json(e.to_string()),
                });
            }
        };
        for (k, st) in c.steps.iter().enumerate() {
            if let Shape::Lasso(p) = &st.shape {
                p.check().map_err(|e| {
                    CorpusError::Invalid(format!("step {} of {}: {e}", k + 1, c.steps.len()))
                })?;
            }
        }
        c.codebook.check()?;
        check_form(&c.codes)?;
        check_cleared(&c.cleared)?;
        if c.ids.len() != c.count {
            return Err(CorpusError::Invalid(format!(
                "the corpus file says {} items but lists {} ids",
                c.count,
                c.ids.len()
            )));
        }
        Ok(c)
    }

    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a corpus file serialises")
    }
}

/// How the corpus was chosen, in one line (for summaries and the page).
pub fn describe(map: &str, steps: &[Step], filters: &[Filter]) -> String {
    let mut parts = Vec::new();
    for s in steps {
        let what = match &s.shape {
            Shape::Lasso(p) => format!("a lasso of {} vertices on the {map} map", p.0.len()),
            Shape::Rect(_) => format!("a rectangle on the {map} map"),
            Shape::Ids(ids) if ids.len() == 1 => format!("item {}", ids[0]),
            Shape::Ids(ids) => format!("{} items by id", ids.len()),
            Shape::Everything(_) => "every item".to_string(),
        };
        parts.push(match s.op {
            Op::Replace => format!("selected {what}"),
            Op::Add => format!("added {what}"),
            Op::Subtract => format!("removed {what}"),
        });
    }
    let labels: Vec<String> = filters.iter().map(Filter::label).collect();
    let mut out = if parts.is_empty() {
        "all items".to_string()
    } else {
        parts.join("; ")
    };
    if !labels.is_empty() {
        out.push_str(&format!(", filtered by {}", labels.join("; ")));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_corpus_is_described_in_one_line_with_its_filters_as_the_filters_row_says() {
        let steps = vec![
            Step {
                op: Op::Replace,
                shape: Shape::Lasso(Polygon::parse("0,0 1,0 1,1 0,1").unwrap()),
            },
            Step {
                op: Op::Subtract,
                shape: Shape::Ids(vec!["rec-1".into()]),
            },
        ];
        let filters = vec![
            Filter::Category {
                field: "technique".into(),
                values: vec!["etching".into(), "woodcut".into()],
            },
            Filter::Date {
                field: "dating".into(),
                from: 1500,
                to: 1560,
                rule: crate::filter::DateRule::Overlap,
            },
        ];
        assert_eq!(
            describe("similarity", &steps, &filters),
            "selected a lasso of 4 vertices on the similarity map; removed item rec-1, \
             filtered by technique: etching, woodcut; dating: 1500–1560 (overlapping)"
        );
        assert_eq!(describe("similarity", &[], &[]), "all items");
    }

    #[test]
    fn steps_replay_in_order_and_read_back_from_json() {
        // A 10 x 10 grid of items at integer positions; id "p{x}-{y}".
        let positions: Vec<[f32; 2]> = (0..100)
            .map(|i| [(i % 10) as f32, (i / 10) as f32])
            .collect();
        let index_of = |id: &str| -> Option<usize> {
            let (x, y) = id.strip_prefix('p')?.split_once('-')?;
            Some(y.parse::<usize>().ok()? * 10 + x.parse::<usize>().ok()?)
        };
        let at = Lookup {
            positions: &positions,
            index_of: &index_of,
            near: None,
            runs: None,
        };
        let steps = vec![
            Step {
                op: Op::Replace,
                shape: Shape::Rect([-0.5, -0.5, 4.5, 4.5]), // 25 items
            },
            Step {
                op: Op::Subtract,
                shape: Shape::Lasso(Polygon::parse("-1,-1 3.5,-1 -1,3.5").unwrap()), // x + y < 2.5: 6 items
            },
            Step {
                op: Op::Add,
                shape: Shape::Ids(vec!["p9-9".into()]),
            },
        ];
        let sel = replay(&steps, &at).unwrap().unwrap();
        assert_eq!(sel.count(), 25 - 6 + 1);
        assert!(sel.get(99) && !sel.get(0) && sel.get(44));
        assert_eq!(replay(&[], &at).unwrap(), None);
        let json = serde_json::to_string(&steps).unwrap();
        assert!(json.contains(r#"{"op":"add","ids":["p9-9"]}"#), "{json}");
        let back: Vec<Step> = serde_json::from_str(&json).unwrap();
        assert_eq!(back, steps);
        let e = replay(
            &[Step {
                op: Op::Add,
                shape: Shape::Ids(vec!["nowhere".into()]),
            }],
            &at,
        )
        .unwrap_err();
        assert!(e.to_string().contains("\"nowhere\""), "{e}");
    }

    #[test]
    fn a_bad_step_or_filter_in_a_corpus_file_is_named() {
        let file = |steps: &str, filters: &str| {
            format!(
                r#"{{"format": "vitrine-corpus", "format_version": 1,
                "atlas": {{"title": "t", "manifest_sha256": "00", "item_count": 3}},
                "build": {{}}, "map": "similarity", "steps": {steps}, "filters": {filters},
                "count": 0, "ids": [],
                "made": {{"tool": "vitrine", "tool_version": "0", "time": "2026-01-01T00:00:00Z", "by": "viewer"}}}}"#
            )
        };
        let good_step = r#"{"op": "add", "rect": [0, 0, 1, 1]}"#;
        let ok = CorpusFile::from_json(&file(&format!("[{good_step}]"), "[]")).unwrap();
        assert_eq!(ok.steps.len(), 1);
        // The second step has a lasso of two points.
        let e = CorpusFile::from_json(&file(
            &format!(r#"[{good_step}, {{"op": "add", "lasso": [[0, 0], [1, 1]]}}]"#),
            "[]",
        ))
        .unwrap_err()
        .to_string();
        assert!(e.starts_with("step 2 of 2:"), "{e}");
        // An unknown operation.
        let e = CorpusFile::from_json(&file(r#"[{"op": "xor", "rect": [0, 0, 1, 1]}]"#, "[]"))
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("step 1 of 1:") && e.contains("xor"), "{e}");
        // A misspelt key of a filter is refused, naming the filter and the key.
        let e = CorpusFile::from_json(&file(
            "[]",
            r#"[{"kind": "category", "field": "technique", "values": ["etching"]},
                {"kind": "date", "field": "date", "from": 1500, "to": 1600, "rule": "within", "rulee": "overlap"}]"#,
        ))
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("filter 2 of 2:") && e.contains("rulee"),
            "{e}"
        );
    }
}
