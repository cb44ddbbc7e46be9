//! Catalogue datings to year ranges.
//!
//! The rule, stated once (docs/atlas-format.md repeats it):
//! - `1602` → 1602–1602; `-450` or `450 BC`/`450 BCE` → −450.
//! - `1550-1575`, `1550–1575`, `1550 to 1575`, `1550/1575` → 1550–1575; `1550-75` → 1550–1575.
//! - `c. 1540`, `ca. 1540`, `circa 1540`, `about 1540`, `around 1540`, `c.1540` → 1535–1545 (five years either side).
//! - `1540s` → 1540–1549. `16th century` → 1500–1599; `early` / `mid` / `late` take its first, middle
//!   and last third (1500–1533, 1533–1566, 1566–1599); `first half` / `second half` its halves.
//! - `before 1600` → 1580–1600 and `after 1600` → 1600–1620 (a twenty-year window, stated here).
//! - `2023-04-05` (an ISO calendar date) → 2023; `17th c.` and `17th cent.` read as `17th century`.
//! - A trailing `?` is ignored. Anything else is not a date: the build keeps the text and reports it.
//! - Years lie within ±9,999 ([`MAX_YEAR`]); a dating beyond (`3000000000s`, `99999`) is not a date
//!   either, and [`beyond_years`] tells the report why.

pub use vitrine_format::YearRange;

const CIRCA_SPAN: i64 = 5;
const OPEN_SPAN: i64 = 20;

pub use vitrine_format::MAX_YEAR;

/// The year range of a catalogue dating, or None when it is not one (see the module's rule).
pub fn parse_date(text: &str) -> Option<YearRange> {
    let (start, end) = parse_any(text)?;
    let within = |y: i64| y.abs() <= MAX_YEAR as i64;
    (within(start) && within(end)).then_some(YearRange {
        start: start as i32,
        end: end as i32,
    })
}

/// Whether `text` is a dating in form whose years lie beyond ±[`MAX_YEAR`].
pub fn beyond_years(text: &str) -> bool {
    parse_any(text).is_some() && parse_date(text).is_none()
}

/// The rule without the bound on years, as (start, end); None as well when a year does not fit
/// an i64.
fn parse_any(text: &str) -> Option<(i64, i64)> {
    let t = text.trim().trim_end_matches('?').trim().to_lowercase();
    if t.is_empty() {
        return None;
    }
    for prefix in [
        "circa ", "ca. ", "ca.", "c. ", "c.", "about ", "around ", "approx. ",
    ] {
        if let Some(rest) = t.strip_prefix(prefix) {
            let y = year(rest.trim())?;
            return Some((y - CIRCA_SPAN, y + CIRCA_SPAN));
        }
    }
    if let Some(rest) = t.strip_prefix("before ") {
        let y = year(rest.trim())?;
        return Some((y - OPEN_SPAN, y));
    }
    if let Some(rest) = t.strip_prefix("after ") {
        let y = year(rest.trim())?;
        return Some((y, y + OPEN_SPAN));
    }
    // ISO calendar dates (2023-04-05) keep their year.
    let parts: Vec<&str> = t.split('-').collect();
    if parts.len() == 3 && parts[0].len() == 4 && parts[1].len() == 2 && parts[2].len() == 2 {
        if let (Ok(y), Ok(m), Ok(d)) = (
            parts[0].parse::<i32>(),
            parts[1].parse::<u32>(),
            parts[2].parse::<u32>(),
        ) {
            if (1..=12).contains(&m) && (1..=31).contains(&d) {
                return Some((y as i64, y as i64));
            }
        }
    }
    if let Some(r) = century(&t) {
        return Some((r.start as i64, r.end as i64));
    }
    if let Some(d) = t.strip_suffix("0s") {
        let decade: i64 = d.parse().ok()?;
        if d.len() >= 3 {
            let start = decade.checked_mul(10)?;
            return Some((start, start.checked_add(9)?));
        }
        return None;
    }
    for sep in [" to ", "–", "—", "/", "-"] {
        // A leading minus is a sign, not a separator.
        let search_from = if t.starts_with('-') { 1 } else { 0 };
        if let Some(pos) = t[search_from..].find(sep).map(|p| p + search_from) {
            let a = t[..pos].trim();
            let b = t[pos + sep.len()..].trim();
            let start = year(a)?;
            let mut end = year(b)?;
            // "1550-75": the end shares the start's leading digits.
            if b.len() < a.len() && b.chars().all(|c| c.is_ascii_digit()) && start >= 0 {
                let scale = 10i64.pow(b.len() as u32);
                end += start - start % scale;
                if end < start {
                    end += scale;
                }
            }
            if end < start {
                return None;
            }
            return Some((start, end));
        }
    }
    let y = year(&t)?;
    Some((y, y))
}

/// One year as written (at most five characters, or a BC year below 10,000).
fn year(s: &str) -> Option<i64> {
    let s = s.trim();
    for suffix in [" bce", " bc", "bce", "bc"] {
        if let Some(n) = s.strip_suffix(suffix) {
            let y: i64 = n.trim().parse().ok()?;
            return (y > 0 && y < 10000).then_some(-y);
        }
    }
    let s = s
        .strip_suffix(" ce")
        .or_else(|| s.strip_suffix(" ad"))
        .unwrap_or(s);
    if s.is_empty() || s.len() > 5 {
        return None;
    }
    let digits = s.strip_prefix('-').unwrap_or(s);
    if digits.is_empty() || !digits.chars().all(|c| c.is_ascii_digit()) {
        return None;
    }
    s.parse().ok()
}

fn century(t: &str) -> Option<YearRange> {
    let (part, rest) = if let Some(r) = t.strip_prefix("early ") {
        (Some(0), r)
    } else if let Some(r) = t.strip_prefix("mid ").or_else(|| t.strip_prefix("mid-")) {
        (Some(1), r)
    } else if let Some(r) = t.strip_prefix("late ") {
        (Some(2), r)
    } else if let Some(r) = t
        .strip_prefix("first half of the ")
        .or_else(|| t.strip_prefix("first half "))
    {
        (Some(3), r)
    } else if let Some(r) = t
        .strip_prefix("second half of the ")
        .or_else(|| t.strip_prefix("second half "))
    {
        (Some(4), r)
    } else {
        (None, t)
    };
    let rest = rest
        .strip_suffix(" century")
        .or_else(|| rest.strip_suffix(" cent."))
        .or_else(|| rest.strip_suffix(" c."))?;
    let num = rest
        .strip_suffix("th")
        .or_else(|| rest.strip_suffix("st"))
        .or_else(|| rest.strip_suffix("nd"))
        .or_else(|| rest.strip_suffix("rd"))?;
    let c: i32 = num.parse().ok()?;
    if !(1..=30).contains(&c) {
        return None;
    }
    let start = (c - 1) * 100;
    let end = start + 99;
    Some(match part {
        None => YearRange { start, end },
        Some(0) => YearRange {
            start,
            end: start + 33,
        },
        Some(1) => YearRange {
            start: start + 33,
            end: start + 66,
        },
        Some(2) => YearRange {
            start: start + 66,
            end,
        },
        Some(3) => YearRange {
            start,
            end: start + 49,
        },
        _ => YearRange {
            start: start + 50,
            end,
        },
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn r(start: i32, end: i32) -> Option<YearRange> {
        Some(YearRange { start, end })
    }

    #[test]
    fn catalogue_datings_as_written() {
        // Worked examples of the rule in this module's header.
        assert_eq!(parse_date("1602"), r(1602, 1602));
        assert_eq!(parse_date("c. 1540"), r(1535, 1545));
        assert_eq!(parse_date("ca.1540"), r(1535, 1545));
        assert_eq!(parse_date("circa 1540?"), r(1535, 1545));
        assert_eq!(parse_date("1550-1575"), r(1550, 1575));
        assert_eq!(parse_date("1550–1575"), r(1550, 1575));
        assert_eq!(parse_date("1550 to 1575"), r(1550, 1575));
        assert_eq!(parse_date("1550-75"), r(1550, 1575));
        assert_eq!(parse_date("1598-03"), r(1598, 1603));
        assert_eq!(parse_date("1540s"), r(1540, 1549));
        assert_eq!(parse_date("16th century"), r(1500, 1599));
        assert_eq!(parse_date("late 16th century"), r(1566, 1599));
        assert_eq!(parse_date("first half of the 17th century"), r(1600, 1649));
        assert_eq!(parse_date("before 1600"), r(1580, 1600));
        assert_eq!(parse_date("450 BC"), r(-450, -450));
        assert_eq!(parse_date("2023-04-05"), r(2023, 2023));
        assert_eq!(parse_date("17th c."), r(1600, 1699));
        assert_eq!(parse_date("mid 17th cent."), r(1633, 1666));
        assert_eq!(parse_date("-450"), r(-450, -450));
        assert_eq!(parse_date("1575-1550"), None);
        assert_eq!(parse_date("undated"), None);
        assert_eq!(parse_date("12.5"), None);
        assert_eq!(parse_date(""), None);
    }

    #[test]
    fn years_beyond_the_bound_are_not_dates_and_say_so() {
        assert_eq!(parse_date("9999"), r(9999, 9999));
        assert_eq!(parse_date("-9999"), r(-9999, -9999));
        assert_eq!(parse_date("9990s"), r(9990, 9999));
        for far in [
            "3000000000s",
            "99999",
            "10000",
            "-10000",
            "c. 9999",
            "after 9990",
        ] {
            assert_eq!(parse_date(far), None, "{far}");
        }
        for far in ["3000000000s", "99999", "10000", "c. 9999", "after 9990"] {
            assert!(beyond_years(far), "{far}");
        }
        // Not datings at all, and years past what an i32 holds: no overflow, no dating.
        assert!(!beyond_years("undated"));
        assert!(!beyond_years("1602"));
        assert_eq!(parse_date("9999 BC"), r(-9999, -9999));
        assert_eq!(parse_date("300000000000000000000s"), None);
        assert!(!beyond_years("300000000000000000000s"));
        assert_eq!(parse_date("2147483640s"), None);
    }
}
