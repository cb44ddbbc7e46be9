//! The corpus in a link: the map, the view, the filters and the selection steps as the address's
//! hash carries them (JSON, then URI-encoded by the page), and back. Items picked by hand travel
//! as packed item numbers of this build of the atlas (docs/corpus-file.md).

use vitrine_corpus::corpus::{Op, Shape, Step};
use vitrine_corpus::filter::Filter;
use vitrine_corpus::polygon::Polygon;

use crate::viewer::Viewer;

/// The longest address the page writes: links much longer are cut or refused by mail programs,
/// chat tools and some servers.
pub const MAX_LINK: usize = 8000;
/// The hash's key: `#corpus=…`.
pub const KEY: &str = "corpus=";

/// Map coordinates kept to six significant digits in a link (a lasso of 200 points stays short).
pub fn round(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let digits = 6 - v.abs().log10().ceil() as i32;
    let k = 10f64.powi(digits);
    (v * k).round() / k
}

fn rounded(steps: &[Step]) -> Vec<Step> {
    steps.iter().cloned().map(rounded_step).collect()
}

/// A step with its map coordinates as a link keeps them. The viewer applies drawn steps so
/// rounded, so that the page, its link and its corpus file all select the very same items (an
/// item a millionth of the map from a lasso's edge would otherwise fall on either side).
pub fn rounded_step(s: Step) -> Step {
    Step {
        op: s.op,
        shape: match s.shape {
            Shape::Lasso(p) => Shape::Lasso(Polygon(
                p.0.iter().map(|q| [round(q[0]), round(q[1])]).collect(),
            )),
            Shape::Rect(r) => Shape::Rect(r.map(round)),
            other => other,
        },
    }
}

/// A selection step as a link carries it: items picked by hand go by their numbers in this
/// build of the atlas, packed (a few characters each rather than a whole id); other steps as
/// they are.
#[derive(Debug, serde::Serialize, serde::Deserialize)]
#[serde(untagged)]
pub enum LinkStep {
    Packed { op: Op, items: String },
    Plain(Step),
}

/// What a link carries.
#[derive(Debug, serde::Serialize, serde::Deserialize)]
pub struct Shared {
    pub v: u32,
    pub map: String,
    /// Centre x, y and zoom relative to the fitted view (of `map`; none when another map is shown).
    #[serde(default)]
    pub view: Option<[f64; 3]>,
    /// The build (see [`build_of`]) whose item numbers packed steps use.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub build: Option<String>,
    #[serde(default)]
    pub steps: Vec<LinkStep>,
    #[serde(default)]
    pub filters: Vec<Filter>,
}

/// The first 16 hex digits of the manifest's SHA-256: names the build whose item numbers a link
/// uses.
pub fn build_of(v: &Viewer) -> String {
    v.manifest_sha.chars().take(16).collect()
}

/// The current corpus and view as a link carries them (JSON, before the page URI-encodes it).
pub fn link_json(v: &mut Viewer) -> String {
    let steps = rounded(v.selection.steps());
    let mut packed = false;
    let mut out = Vec::with_capacity(steps.len());
    for s in steps {
        let Shape::Ids(ids) = &s.shape else {
            out.push(LinkStep::Plain(s));
            continue;
        };
        // Ids this atlas does not have stay as they are.
        let numbers: Option<Vec<u32>> = v
            .index_of()
            .and_then(|m| ids.iter().map(|id| m.get(id).map(|&i| i as u32)).collect());
        match numbers {
            Some(n) => {
                packed = true;
                out.push(LinkStep::Packed {
                    op: s.op,
                    items: vitrine_corpus::packed::pack(&n),
                });
            }
            None => out.push(LinkStep::Plain(s)),
        }
    }
    let k = if v.selection.steps().is_empty() {
        v.atlas.current
    } else {
        v.selection.map.min(v.atlas.maps.len() - 1)
    };
    let s = Shared {
        v: 1,
        map: v.atlas.maps[k].name.clone(),
        view: (k == v.atlas.current).then(|| {
            [
                round(v.camera.centre[0]),
                round(v.camera.centre[1]),
                round(v.camera.zoom / v.base_zoom),
            ]
        }),
        build: packed.then(|| build_of(v)),
        steps: out,
        filters: v.filters.list().to_vec(),
    };
    serde_json::to_string(&s).unwrap_or_default()
}

/// The steps of a link as steps (packed items back to their ids); packed items need the link to
/// come from this build of the atlas.
pub fn steps_of(
    v: &Viewer,
    build: Option<&str>,
    steps: Vec<LinkStep>,
) -> Result<Vec<Step>, String> {
    let mut out = Vec::with_capacity(steps.len());
    for s in steps {
        match s {
            LinkStep::Plain(s) => out.push(s),
            LinkStep::Packed { op, items } => {
                if build != Some(build_of(v).as_str()) {
                    return Err(
                        "it names items by their place in another build of this atlas \
                         (ask for the corpus file, which names them by id)"
                            .into(),
                    );
                }
                let numbers =
                    vitrine_corpus::packed::unpack(&items, v.atlas.n).map_err(|e| e.to_string())?;
                let ids = numbers.iter().map(|&i| v.atlas.id(i as usize).to_string());
                out.push(Step {
                    op,
                    shape: Shape::Ids(ids.collect()),
                });
            }
        }
    }
    Ok(out)
}

impl Viewer {
    /// Applies a map, filters and steps (from a link or a corpus file), and the view after when
    /// given: the steps first (on that map), then the filters; each leaves things as they were if
    /// it fails. The map is switched by the caller (it is shown, so the page changes too).
    pub fn restore(
        &mut self,
        map: usize,
        filters: Vec<Filter>,
        steps: Vec<Step>,
        view: Option<[f64; 3]>,
    ) -> Result<(), String> {
        let ids = steps.iter().any(|s| matches!(s.shape, Shape::Ids(_)));
        let old_map = self.selection.map;
        self.selection.map = map;
        let r = self.with_lookup(ids, |sel, at| sel.set_steps(map, steps, at));
        if let Err(e) = r {
            self.selection.map = old_map;
            return Err(e.to_string());
        }
        let n = self.atlas.n;
        self.filters
            .replace(filters, &self.atlas.fields, n)
            .map_err(|e| e.to_string())?;
        if let Some([x, y, z]) = view {
            let limits = self.zoom_limits();
            let zoom = (self.base_zoom * z).clamp(limits[0], limits[1]);
            if x.is_finite() && y.is_finite() && zoom.is_finite() && zoom > 0.0 {
                self.glide = None;
                self.camera.centre = [x, y];
                self.camera.zoom = zoom;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coordinates_keep_six_significant_digits() {
        assert_eq!(round(1.234_567_89), 1.234_57);
        assert_eq!(round(-123_456.789), -123_457.0);
        assert_eq!(round(0.000_123_456_78), 0.000_123_457);
        assert_eq!(round(0.0), 0.0);
        assert!(round(f64::NAN).is_nan());
    }

    #[test]
    fn a_link_reads_back_as_it_was_written() {
        let s = Shared {
            v: 1,
            map: "similarity".into(),
            view: Some([1.5, -2.0, 3.0]),
            build: Some("0123456789abcdef".into()),
            steps: vec![
                LinkStep::Packed {
                    op: Op::Add,
                    items: vitrine_corpus::packed::pack(&[3, 9, 10]),
                },
                LinkStep::Plain(Step {
                    op: Op::Replace,
                    shape: Shape::Rect([0.0, 0.0, 1.0, 1.0]),
                }),
            ],
            filters: vec![],
        };
        let text = serde_json::to_string(&s).unwrap();
        let back: Shared = serde_json::from_str(&text).unwrap();
        assert_eq!(back.map, "similarity");
        assert_eq!(back.view, Some([1.5, -2.0, 3.0]));
        assert!(
            matches!(&back.steps[0], LinkStep::Packed { op: Op::Add, items }
            if vitrine_corpus::packed::unpack(items, 20).unwrap() == vec![3, 9, 10])
        );
        assert!(matches!(
            &back.steps[1],
            LinkStep::Plain(Step {
                op: Op::Replace,
                shape: Shape::Rect(_)
            })
        ));
    }
}
