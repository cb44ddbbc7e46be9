//! Colour by field: the marks take the colour of a catalogue value instead of their picture's.
//! Categories use the Okabe-Ito colour-blind-safe palette for their seven largest values (the rest
//! grey); numbers and dates a ramp even in perceived lightness (OKLab), dark to light.

use vitrine_corpus::columns::{Column, FieldColumn};

pub use vitrine_format::palette::OKABE_ITO;
/// Values beyond the seventh, and items without a value.
pub const OTHER: [u8; 3] = [0xB4, 0xAE, 0xA4];
pub const MISSING: [u8; 3] = [0xD8, 0xD2, 0xC8];

/// What the legend shows.
#[derive(Debug, Clone, PartialEq)]
pub enum Legend {
    /// (value, colour, items) for the coloured values, largest first; then the items of the rest.
    Categories(Vec<(String, [u8; 3], u64)>, u64),
    /// The ramp from `lo` to `hi` (the 2nd and 98th percentiles; values beyond take the ends).
    Ramp {
        lo: f64,
        hi: f64,
        stops: Vec<[u8; 3]>,
    },
}

fn srgb_from_linear(x: f64) -> u8 {
    let x = x.clamp(0.0, 1.0);
    let s = if x <= 0.003_130_8 {
        12.92 * x
    } else {
        1.055 * x.powf(1.0 / 2.4) - 0.055
    };
    (s * 255.0).round() as u8
}

/// OKLab (L, a, b) to sRGB, by the published OKLab matrices (Ottosson, 2020).
pub fn oklab_to_srgb(l: f64, a: f64, b: f64) -> [u8; 3] {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548 * b;
    let (l3, m3, s3) = (l_ * l_ * l_, m_ * m_ * m_, s_ * s_ * s_);
    let r = 4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3;
    let g = -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3;
    let bb = -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701 * s3;
    [
        srgb_from_linear(r),
        srgb_from_linear(g),
        srgb_from_linear(bb),
    ]
}

/// The ramp at t in 0..=1: lightness rises evenly from 0.32 to 0.90 while the hue turns from
/// deep blue through teal to a warm yellow, at a chroma low enough to stay inside sRGB.
pub fn ramp(t: f64) -> [u8; 3] {
    let t = t.clamp(0.0, 1.0);
    let l = 0.32 + 0.58 * t;
    let hue = (265.0 - 165.0 * t).to_radians();
    let c = 0.09 + 0.03 * (std::f64::consts::PI * t).sin();
    oklab_to_srgb(l, c * hue.cos(), c * hue.sin())
}

fn rgba(c: [u8; 3]) -> [u8; 4] {
    [c[0], c[1], c[2], 255]
}

/// Every item's mark colour by field `c`, and the legend.
pub fn by_field(c: &FieldColumn, n: usize) -> (Vec<[u8; 4]>, Legend) {
    match &c.column {
        Column::Category(codes) => {
            let nv = c.field.values.len();
            let n = n.min(codes.len());
            // Items holding each value (every value of a multi-valued field).
            let mut counts = vec![0u64; nv];
            for i in 0..n {
                for &k in c.codes_of(i) {
                    if let Some(x) = counts.get_mut(k as usize) {
                        *x += 1;
                    }
                }
            }
            let mut order: Vec<usize> = (0..nv).filter(|&v| counts[v] > 0).collect();
            order.sort_by_key(|&v| (std::cmp::Reverse(counts[v]), v));
            let mut rank = vec![usize::MAX; nv];
            for (r, &v) in order.iter().enumerate() {
                rank[v] = r;
            }
            // An item takes its value's colour; with several values, that of the most common.
            let pick: Vec<Option<usize>> = (0..n)
                .map(|i| {
                    c.codes_of(i)
                        .iter()
                        .map(|&k| k as usize)
                        .filter(|&k| k < nv)
                        .min_by_key(|&k| rank[k])
                })
                .collect();
            let mut coloured = vec![0u64; nv];
            for v in pick.iter().flatten() {
                coloured[*v] += 1;
            }
            let mut colour = vec![OTHER; nv];
            let mut shown = Vec::new();
            for (k, &v) in order.iter().take(OKABE_ITO.len()).enumerate() {
                colour[v] = OKABE_ITO[k];
                shown.push((c.field.values[v].clone(), OKABE_ITO[k], coloured[v]));
            }
            let rest = order
                .iter()
                .skip(OKABE_ITO.len())
                .map(|&v| coloured[v])
                .sum();
            let cols = pick
                .iter()
                .map(|v| rgba(v.map_or(MISSING, |v| colour[v])))
                .collect();
            (cols, Legend::Categories(shown, rest))
        }
        Column::Number(v) => {
            let vals: Vec<f64> = v.iter().map(|&x| x as f64).collect();
            ramped(&vals, |x| x.is_nan())
        }
        Column::Date { start, end } => {
            // An item is placed at the middle of its dating range.
            let vals: Vec<f64> = start
                .iter()
                .zip(end)
                .map(|(&s, &e)| {
                    if s == i32::MIN {
                        f64::NAN
                    } else {
                        (s as f64 + e as f64) / 2.0
                    }
                })
                .collect();
            ramped(&vals, |x| x.is_nan())
        }
        Column::Text(_) => (
            vec![rgba(MISSING); n],
            Legend::Categories(Vec::new(), n as u64),
        ),
    }
}

pub fn ramped(vals: &[f64], missing: impl Fn(f64) -> bool) -> (Vec<[u8; 4]>, Legend) {
    let mut sorted: Vec<f64> = vals.iter().copied().filter(|&x| !missing(x)).collect();
    sorted.sort_by(f64::total_cmp);
    let at = |q: f64| -> f64 {
        if sorted.is_empty() {
            0.0
        } else {
            sorted[((sorted.len() - 1) as f64 * q).round() as usize]
        }
    };
    let (lo, hi) = (at(0.02), at(0.98));
    let span = (hi - lo).max(f64::MIN_POSITIVE);
    let cols = vals
        .iter()
        .map(|&x| {
            if missing(x) {
                rgba(MISSING)
            } else {
                rgba(ramp((x - lo) / span))
            }
        })
        .collect();
    let stops = (0..=8).map(|k| ramp(k as f64 / 8.0)).collect();
    (cols, Legend::Ramp { lo, hi, stops })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// OKLab lightness of an sRGB colour (forward matrices, Ottosson 2020), for checking the ramp.
    fn lightness(c: [u8; 3]) -> f64 {
        let lin = |u: u8| {
            let s = u as f64 / 255.0;
            if s <= 0.040_45 {
                s / 12.92
            } else {
                ((s + 0.055) / 1.055).powf(2.4)
            }
        };
        let (r, g, b) = (lin(c[0]), lin(c[1]), lin(c[2]));
        let l = 0.412_221_470_8 * r + 0.536_332_536_3 * g + 0.051_445_992_9 * b;
        let m = 0.211_903_498_2 * r + 0.680_699_545_1 * g + 0.107_396_956_6 * b;
        let s = 0.088_302_461_9 * r + 0.281_718_837_6 * g + 0.629_978_700_5 * b;
        0.210_454_255_3 * l.cbrt() + 0.793_617_785 * m.cbrt() - 0.004_072_046_8 * s.cbrt()
    }

    #[test]
    fn the_ramp_rises_evenly_in_lightness_and_stays_in_gamut() {
        // Worked values: OKLab white (1, 0, 0) is sRGB white; the ramp's lightness steps are even.
        assert_eq!(oklab_to_srgb(1.0, 0.0, 0.0), [255, 255, 255]);
        let ls: Vec<f64> = (0..=20).map(|k| lightness(ramp(k as f64 / 20.0))).collect();
        for w in ls.windows(2) {
            let step = w[1] - w[0];
            assert!((step - 0.029).abs() < 0.006, "{ls:?}");
        }
        assert!(
            (ls[0] - 0.32).abs() < 0.02 && (ls[20] - 0.90).abs() < 0.02,
            "{ls:?}"
        );
    }

    #[test]
    fn the_seven_largest_values_get_the_palette_in_order_and_the_rest_grey() {
        use vitrine_format::{ArrayRef, DType, Field, FieldKind};
        // Value k appears 10 - k times, except value 9 (not used at all).
        let mut codes = Vec::new();
        for k in 0..9u32 {
            codes.extend(std::iter::repeat_n(k, 10 - k as usize));
        }
        codes.push(u32::MAX);
        let n = codes.len();
        let field = Field {
            name: "technique".into(),
            kind: FieldKind::Category,
            column: ArrayRef {
                file: "t.bin".into(),
                dtype: DType::U32,
                count: n as u64,
                bytes: 4 * n as u64,
                sha256: String::new(),
            },
            column2: None,
            values: (0..10).map(|k| format!("v{k}")).collect(),
            value_counts: vec![],
            written: None,
            multi: None,
            multi_separator: None,
        };
        let c = FieldColumn {
            field,
            column: Column::Category(codes.clone()),
            multi: None,
            written: None,
            folded: Default::default(),
        };
        let (cols, legend) = by_field(&c, n);
        let Legend::Categories(shown, rest) = legend else {
            panic!("a category legend")
        };
        assert_eq!(shown.len(), 7);
        assert_eq!(shown[0], ("v0".to_string(), OKABE_ITO[0], 10));
        assert_eq!(shown[6].0, "v6");
        assert_eq!(rest, 3 + 2);
        assert_eq!(cols[0], [0xE6, 0x9F, 0x00, 255]);
        let first_v7 = codes.iter().position(|&k| k == 7).unwrap();
        assert_eq!(cols[first_v7], rgba(OTHER));
        assert_eq!(cols[n - 1], rgba(MISSING));
    }
}
