//! Catalogue datings to year ranges.
//!
//! The rule, stated once (docs/atlas-format.md repeats it):
//! - `1602` → 1602–1602; `-450` or `450 BC`/`450 BCE` → −450; `450 AD`, `450 CE` → 450.
//! - `1550-1575`, `1550–1575`, `1550 to 1575`, `1550/1575`, `1550 bis 1575`, `1550 à 1575` →
//!   1550–1575; `1550-75`, `1550–75`, `1540/50` → the end shares the start's leading digits.
//! - ISO 8601 dates keep their year: `2023-04-05` (and with a time); `1923-04` is a year and a
//!   month where it cannot be an abbreviated range (a hyphen and a month 01-12 not after the year's
//!   last two digits: 1923-04, 1985-04, 1598-03), else the range (`1911-12` → 1911–1912, which holds
//!   the month anyway); in an EDTF interval or with a qualifier (`2004-06/2006-08`, `2004-06~`) it
//!   is always a date. Write an abbreviated range with an en dash, `1598–03`, or in full.
//! - EDTF (ISO 8601-2): unspecified digits `154X` → 1540–1549, `15XX` → 1500–1599, `1985-XX`,
//!   `156X-12-25`; qualifiers `?` (uncertain: the year as written), `~` and `%` (approximate: as
//!   `c.`); intervals `1964/2008`, `2004-06/2006-08`, open ends `../1985` and `1985/..` (a
//!   twenty-year window, as `before` and `after`); sets `[1667, 1668, 1670..1672]` and `{...}` →
//!   their first to last year. EDTF's season months (21–24) are not read: `1921-24` is a range.
//! - `c. 1540`, `ca. 1540`, `circa 1540`, `about 1540`, `around 1540`, `c.1540`, `approx. 1540`,
//!   `um 1540`, `vers 1540`, `env. 1540`, `1540~` → 1535–1545 (five years either side); a range
//!   after them widens by five years at each end (`ca. 1540/50` → 1535–1555).
//! - `1540s`, `1540's`, `1540er` → 1540–1549. Centuries: `16th century`, `16th c.`, `16th cent.`,
//!   `16. Jh.`, `16. Jahrhundert`, `XVIe siècle`, `XVIe s.`, `sec. XVI`, `XVI secolo`, `16e eeuw` →
//!   1500–1599; `early` / `mid` / `late` (`Anfang` / `Mitte` / `Ende`, `début` / `milieu` / `fin`,
//!   `inizio` / `metà` / `fine`) take its first, middle and last third (1500–1533, 1533–1566,
//!   1566–1599); `first half` / `second half` (`1. Hälfte`, `première moitié`, `prima metà`, ...)
//!   its halves; `16th-17th century`, `16./17. Jh.` → 1500–1699.
//! - `before 1600` (`vor`, `avant`, `ante`) → 1580–1600 and `after 1600` (`nach`, `après`, `post`)
//!   → 1600–1620 (a twenty-year window, stated here).
//! - A trailing `?` or `(?)` is ignored; `[1540]` (a date the cataloguer supplied) is 1540.
//! - Anything else is not a date: the build keeps the text and reports it.
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

type Span = (i64, i64);

/// The rule without the bound on years, as (start, end); None as well when a year does not fit
/// an i64.
fn parse_any(text: &str) -> Option<Span> {
    let t = text
        .trim()
        .to_lowercase()
        .replace('—', "–")
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    if t.is_empty() {
        return None;
    }
    let (s, e) = dating(&t, 0)?;
    (s <= e).then_some((s, e))
}

/// Widens a span by the circa span at both ends.
fn circa(s: Span) -> Option<Span> {
    Some((s.0.checked_sub(CIRCA_SPAN)?, s.1.checked_add(CIRCA_SPAN)?))
}

/// Words that make a dating approximate, as prefixes.
const CIRCA: &[&str] = &[
    "circa ",
    "ca. ",
    "ca.",
    "ca ",
    "c. ",
    "c.",
    "about ",
    "around ",
    "approx. ",
    "approximately ",
    "um ",
    "vers ",
    "env. ",
    "environ ",
];
const BEFORE: &[&str] = &["before ", "vor ", "avant ", "ante "];
const AFTER: &[&str] = &["after ", "nach ", "après ", "apres ", "post "];

/// One dating (`depth` bounds the nesting of brackets and qualifiers).
fn dating(t: &str, depth: u32) -> Option<Span> {
    let t = t.trim();
    if t.is_empty() || depth > 6 {
        return None;
    }
    let again = |s: &str| dating(s, depth + 1);
    // Approximate marks, brackets and sets are read only around years (three digits in a row at
    // least), so that a number column's `50%`, `~30` or `[12, 40]` stays numbers.
    let yearish = has_year_digits(t);
    // Qualifiers: uncertain as written; approximate widened.
    // (A qualified YYYY-MM is EDTF, so an ISO date: its year.)
    let iso = |r: &str| iso_year(r).map(|y| (y, y));
    if let Some(r) = t.strip_suffix("(?)").or_else(|| t.strip_suffix('?')) {
        return iso(r).or_else(|| again(r));
    }
    // (Approximate to the month or day keeps the year: only a year is widened.)
    let approximate = |r: &str| iso(r).or_else(|| circa(again(r)?));
    if let Some(r) = t.strip_suffix('~').or_else(|| t.strip_suffix('%')) {
        return if yearish { approximate(r) } else { None };
    }
    if let Some(r) = t.strip_prefix('?') {
        return iso(r).or_else(|| again(r));
    }
    if let Some(r) = t.strip_prefix('~').or_else(|| t.strip_prefix('%')) {
        return if yearish { approximate(r) } else { None };
    }
    // EDTF qualifiers on a month or day (2004-06-~11, 2004-?06-11): the year as written.
    if t.len() > 4 && t.is_char_boundary(4) && t[4..].contains(['?', '~', '%']) {
        let plain: String = t
            .chars()
            .filter(|c| !matches!(c, '?' | '~' | '%'))
            .collect();
        if let Some(r) = single(&plain) {
            return Some(r);
        }
    }
    // Brackets: a supplied date, or an EDTF set of dates.
    for (open, close) in [('[', ']'), ('{', '}')] {
        if let Some(inner) = t.strip_prefix(open).and_then(|r| r.strip_suffix(close)) {
            if !yearish {
                return None;
            }
            return if inner.contains(',') || inner.contains("..") {
                set(inner, depth)
            } else {
                again(inner)
            };
        }
    }
    for w in CIRCA {
        if let Some(r) = t.strip_prefix(w) {
            return circa(again(r)?);
        }
    }
    for w in BEFORE {
        if let Some(r) = t.strip_prefix(w) {
            let (s, _) = again(r)?;
            return Some((s.checked_sub(OPEN_SPAN)?, s));
        }
    }
    for w in AFTER {
        if let Some(r) = t.strip_prefix(w) {
            let (_, e) = again(r)?;
            return Some((e, e.checked_add(OPEN_SPAN)?));
        }
    }
    // EDTF open intervals.
    if let Some(r) = t.strip_prefix("../") {
        let (s, _) = again(r)?;
        return Some((s.checked_sub(OPEN_SPAN)?, s));
    }
    if let Some(r) = t.strip_suffix("/..").or_else(|| t.strip_suffix('/')) {
        let (_, e) = again(r)?;
        return Some((e, e.checked_add(OPEN_SPAN)?));
    }
    if let Some(r) = century(t) {
        return Some(r);
    }
    if let Some(r) = single(t) {
        return Some(r);
    }
    range(t, depth)
}

/// Whether `t` holds three digits in a row (a year as archives write one).
fn has_year_digits(t: &str) -> bool {
    t.as_bytes()
        .windows(3)
        .any(|w| w.iter().all(u8::is_ascii_digit))
}

/// The members of an EDTF set (`1667, 1668, 1670..1672`, `..1760-12-03`): their first to last year.
/// Every member must be a year (three digits or more) or a date.
fn set(inner: &str, depth: u32) -> Option<Span> {
    let mut span: Option<Span> = None;
    for m in inner.split(',') {
        let m = m.trim();
        if !has_year_digits(m) {
            return None;
        }
        let part = if let Some(r) = m.strip_prefix("..") {
            let (s, _) = dating(r, depth + 1)?;
            (s.checked_sub(OPEN_SPAN)?, s)
        } else if let Some(r) = m.strip_suffix("..") {
            let (_, e) = dating(r, depth + 1)?;
            (e, e.checked_add(OPEN_SPAN)?)
        } else if let Some((a, b)) = m.split_once("..") {
            (dating(a, depth + 1)?.0, dating(b, depth + 1)?.1)
        } else {
            dating(m, depth + 1)?
        };
        span = Some(match span {
            None => part,
            Some((s, e)) => (s.min(part.0), e.max(part.1)),
        });
    }
    span
}

/// The year of a strict ISO 8601 date or year-month (YYYY-MM, YYYY-MM-DD), as EDTF intervals
/// write their ends.
fn iso_year(s: &str) -> Option<i64> {
    let p: Vec<&str> = s.trim().split('-').collect();
    let month = |m: &str| m.len() == 2 && m.parse::<u32>().is_ok_and(|v| (1..=12).contains(&v));
    let day = |d: &str| d.len() == 2 && d.parse::<u32>().is_ok_and(|v| (1..=31).contains(&v));
    let ok = match p.as_slice() {
        [y, m] => y.len() == 4 && month(m),
        [y, m, d] => y.len() == 4 && month(m) && day(d),
        _ => false,
    };
    if ok && p[0].chars().all(|c| c.is_ascii_digit()) {
        p[0].parse().ok()
    } else {
        None
    }
}

/// A range: two datings joined by a separator; an end shorter than its start shares the start's
/// leading digits (`1550-75`).
fn range(t: &str, depth: u32) -> Option<Span> {
    // An EDTF interval of ISO dates: 2004-06/2006-08.
    if let Some((a, b)) = t.split_once('/') {
        if let (Some(s), Some(e)) = (iso_year(a), iso_year(b)) {
            return (s <= e).then_some((s, e));
        }
    }
    for sep in [" to ", " bis ", " à ", "–", "/", "-"] {
        // A leading minus is a sign, not a separator.
        let from = usize::from(t.starts_with('-'));
        let Some(pos) = t[from..].find(sep).map(|p| p + from) else {
            continue;
        };
        let (a, b) = (t[..pos].trim(), t[pos + sep.len()..].trim());
        let start = dating(a, depth + 1)?;
        let mut end = dating(b, depth + 1)?;
        let digits = |s: &str| !s.is_empty() && s.chars().all(|c| c.is_ascii_digit());
        if b.len() < a.len() && digits(a) && digits(b) && start.0 >= 0 {
            let scale = 10i64.pow(b.len() as u32);
            let e = end.0 + start.0 - start.0 % scale;
            let e = if e < start.0 { e + scale } else { e };
            end = (e, e);
        }
        if end.1 < start.0 {
            return None;
        }
        return Some((start.0, end.1));
    }
    None
}

/// One point in time (no range): a year, an ISO date, EDTF unspecified digits, a decade.
fn single(t: &str) -> Option<Span> {
    if let Some(y) = year(t) {
        return Some((y, y));
    }
    // EDTF's years of more than four digits: Y170000002, Y-170000002 (beyond what is kept, and
    // reported as such).
    if let Some(y) = t.strip_prefix('y') {
        let digits = y.strip_prefix('-').unwrap_or(y);
        if !digits.is_empty() && digits.chars().all(|c| c.is_ascii_digit()) {
            let v: i64 = y.parse().ok()?;
            return Some((v, v));
        }
    }
    // ISO 8601 and EDTF: YYYY-MM, YYYY-MM-DD (and a time after a T), months and days unspecified
    // (XX) as well; the year may have unspecified digits.
    let date = t
        .split_once('t')
        .map_or(t, |(d, time)| if time.contains(':') { d } else { t });
    let parts: Vec<&str> = date.split('-').collect();
    let unspecified_or = |p: &str, range: std::ops::RangeInclusive<u32>| {
        p.len() == 2 && (p == "xx" || p.parse::<u32>().is_ok_and(|v| range.contains(&v)))
    };
    // YYYY-MM is a year and month where it cannot be an abbreviated range: its month is not after
    // the year's last two digits (1923-04, 1985-04), or unspecified (XX); `1911-12` is 1911-1912,
    // a range that holds the month anyway.
    let month_only = |y: &str, m: &str| {
        unspecified_or(m, 1..=12)
            && (m == "xx"
                || !y.chars().all(|c| c.is_ascii_digit())
                || y.get(2..).and_then(|t| t.parse::<u32>().ok()) >= m.parse::<u32>().ok())
    };
    let dated = match parts.as_slice() {
        [y] => Some(*y),
        [y, m] if month_only(y, m) => Some(*y),
        [y, m, d] if unspecified_or(m, 1..=12) && unspecified_or(d, 1..=31) => Some(*y),
        _ => None,
    };
    if let Some(y) = dated.filter(|y| y.len() == 4) {
        if y.chars().all(|c| c.is_ascii_digit()) {
            let v: i64 = y.parse().ok()?;
            return Some((v, v));
        }
        // Unspecified trailing digits: 154X, 15XX, 1XXX.
        let known = y.trim_end_matches(['x', 'u']);
        if !known.is_empty() && known.chars().all(|c| c.is_ascii_digit()) {
            let scale = 10i64.pow((4 - known.len()) as u32);
            let s = known.parse::<i64>().ok()? * scale;
            return Some((s, s + scale - 1));
        }
    }
    // Decades: 1540s, 1540's, 1540er (Jahre).
    let decade = t
        .strip_suffix("'s")
        .or_else(|| t.strip_suffix('s'))
        .or_else(|| t.strip_suffix("er jahre"))
        .or_else(|| t.strip_suffix("er"))?;
    let (negative, digits) = match decade.strip_prefix('-') {
        Some(d) => (true, d),
        None => (false, decade),
    };
    let d = digits.strip_suffix('0')?;
    if digits.len() >= 4 && digits.chars().all(|c| c.is_ascii_digit()) {
        let start = d.parse::<i64>().ok()?.checked_mul(10)?;
        // A BC decade (-1540s) runs from -1540 towards the present, as before: -1540 to -1531.
        return Some(if negative {
            (-start, -start + 9)
        } else {
            (start, start.checked_add(9)?)
        });
    }
    None
}

/// One year as written (at most five characters, or a BC year below 10,000).
fn year(s: &str) -> Option<i64> {
    let s = s.trim();
    for suffix in [
        " bce",
        " bc",
        "bce",
        "bc",
        " v. chr.",
        " av. j.-c.",
        " a.c.",
    ] {
        if let Some(n) = s.strip_suffix(suffix) {
            let y: i64 = n.trim().parse().ok()?;
            return (y > 0 && y < 10000).then_some(-y);
        }
    }
    let s = s
        .strip_suffix(" ce")
        .or_else(|| s.strip_suffix(" ad"))
        .or_else(|| s.strip_prefix("ad "))
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

/// A part of a century: (first, last) in hundredths of it.
const PARTS: &[(&str, (i64, i64))] = &[
    ("first half of the ", (0, 49)),
    ("second half of the ", (50, 99)),
    ("first half ", (0, 49)),
    ("second half ", (50, 99)),
    ("early ", (0, 33)),
    ("mid-", (33, 66)),
    ("mid ", (33, 66)),
    ("late ", (66, 99)),
    ("1. hälfte des ", (0, 49)),
    ("2. hälfte des ", (50, 99)),
    ("1. hälfte ", (0, 49)),
    ("2. hälfte ", (50, 99)),
    ("erste hälfte des ", (0, 49)),
    ("zweite hälfte des ", (50, 99)),
    ("anfang des ", (0, 33)),
    ("anfang ", (0, 33)),
    ("frühes ", (0, 33)),
    ("mitte des ", (33, 66)),
    ("mitte ", (33, 66)),
    ("ende des ", (66, 99)),
    ("ende ", (66, 99)),
    ("spätes ", (66, 99)),
    ("première moitié du ", (0, 49)),
    ("seconde moitié du ", (50, 99)),
    ("deuxième moitié du ", (50, 99)),
    ("début du ", (0, 33)),
    ("milieu du ", (33, 66)),
    ("fin du ", (66, 99)),
    ("début ", (0, 33)),
    ("milieu ", (33, 66)),
    ("fin ", (66, 99)),
    ("prima metà del ", (0, 49)),
    ("seconda metà del ", (50, 99)),
    ("inizio del ", (0, 33)),
    ("metà del ", (33, 66)),
    ("fine del ", (66, 99)),
    ("inizio ", (0, 33)),
    ("metà ", (33, 66)),
    ("fine ", (66, 99)),
    ("begin ", (0, 33)),
    ("midden ", (33, 66)),
    ("eind ", (66, 99)),
];

/// Words that name a century, after its number (or, for `sec.` and `secolo`, before it).
const CENTURY_AFTER: &[&str] = &[
    " centuries",
    " century",
    " cent.",
    " c.",
    " jahrhunderts",
    " jahrhundert",
    " jhdt.",
    " jh.",
    " jh",
    " siècle",
    " siecle",
    " s.",
    " secolo",
    " eeuw",
];

/// A century or a run of centuries, with an optional part (see [`PARTS`]).
fn century(t: &str) -> Option<Span> {
    let (part, rest) = PARTS
        .iter()
        .find_map(|(p, range)| t.strip_prefix(p).map(|r| (Some(*range), r)))
        .unwrap_or((None, t));
    let core = CENTURY_AFTER
        .iter()
        .find_map(|w| rest.strip_suffix(w))
        .or_else(|| {
            rest.strip_prefix("sec. ")
                .or_else(|| rest.strip_prefix("secolo "))
        })?
        .trim();
    // A run of centuries: 16th-17th, 16./17., xvie-xviie.
    let (first, last) = match ["-", "–", "/", " to ", " and "]
        .iter()
        .find_map(|sep| core.split_once(sep))
    {
        Some((a, b)) => (ordinal(a.trim())?, ordinal(b.trim())?),
        None => {
            let c = ordinal(core)?;
            (c, c)
        }
    };
    if first > last {
        return None;
    }
    let (start, end) = ((first - 1) * 100, (last - 1) * 100 + 99);
    Some(match part {
        None => (start, end),
        Some((a, b)) if first == last => (start + a, start + b),
        Some(_) => return None,
    })
}

/// A century's number: 16th, 1st, 2nd, 3rd, 16., 16e, 16de, 16ème, or in roman numerals (xvi,
/// xvie, xvième); 1 to 30.
fn ordinal(s: &str) -> Option<i64> {
    let s = s.trim();
    let digits = s
        .strip_suffix("th")
        .or_else(|| s.strip_suffix("st"))
        .or_else(|| s.strip_suffix("nd"))
        .or_else(|| s.strip_suffix("rd"))
        .or_else(|| s.strip_suffix("ème"))
        .or_else(|| s.strip_suffix("de"))
        .or_else(|| s.strip_suffix('e'))
        .or_else(|| s.strip_suffix('.'))
        .unwrap_or(s);
    let n = if !digits.is_empty() && digits.chars().all(|c| c.is_ascii_digit()) {
        digits.parse().ok()?
    } else {
        let roman = s
            .strip_suffix("ème")
            .or_else(|| s.strip_suffix("eme"))
            .or_else(|| s.strip_suffix('e'))
            .unwrap_or(s);
        roman_number(roman)?
    };
    (1..=30).contains(&n).then_some(n)
}

/// A roman numeral up to xxx (i, v, x), as centuries are written.
fn roman_number(s: &str) -> Option<i64> {
    if s.is_empty() || !s.chars().all(|c| matches!(c, 'i' | 'v' | 'x')) {
        return None;
    }
    let value = |c: char| match c {
        'i' => 1,
        'v' => 5,
        _ => 10,
    };
    let v: Vec<i64> = s.chars().map(value).collect();
    let mut n = 0;
    for k in 0..v.len() {
        if k + 1 < v.len() && v[k] < v[k + 1] {
            n -= v[k];
        } else {
            n += v[k];
        }
    }
    // Only the canonical spelling: it must write itself back the same.
    (to_roman(n) == s).then_some(n)
}

fn to_roman(mut n: i64) -> String {
    let mut out = String::new();
    for (v, s) in [(10, "x"), (9, "ix"), (5, "v"), (4, "iv"), (1, "i")] {
        while n >= v {
            out.push_str(s);
            n -= v;
        }
    }
    out
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
        assert_eq!(parse_date("1598–03"), r(1598, 1603));
        assert_eq!(parse_date("1598-03"), r(1598, 1598), "ISO 8601: March 1598");
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

    /// Datings as archives write them, with the range each must give. The EDTF forms follow the
    /// examples of the Extended Date/Time Format specification (Library of Congress, 2019; ISO
    /// 8601-2), written here from memory; the others are the trade's own forms in the languages
    /// catalogues use.
    #[test]
    fn datings_as_archives_write_them() {
        let table: &[(&str, Option<(i32, i32)>)] = &[
            // EDTF level 0
            ("1985-04-12", Some((1985, 1985))),
            ("1985-04", Some((1985, 1985))),
            ("1985", Some((1985, 1985))),
            ("1985-04-12T23:20:30", Some((1985, 1985))),
            ("1985-04-12T23:20:30Z", Some((1985, 1985))),
            ("1964/2008", Some((1964, 2008))),
            ("2004-06/2006-08", Some((2004, 2006))),
            ("2004-02-01/2005-02-08", Some((2004, 2005))),
            ("2004-02-01/2005", Some((2004, 2005))),
            // EDTF level 1
            ("Y170000002", None),
            ("1984?", Some((1984, 1984))),
            ("2004-06~", Some((2004, 2004))),
            ("2004-06-11%", Some((2004, 2004))),
            ("1984~", Some((1979, 1989))),
            ("1984%", Some((1979, 1989))),
            ("201X", Some((2010, 2019))),
            ("20XX", Some((2000, 2099))),
            ("2004-XX", Some((2004, 2004))),
            ("1985-04-XX", Some((1985, 1985))),
            ("1985-XX-XX", Some((1985, 1985))),
            ("1985-04-12/..", Some((1985, 2005))),
            ("../1985-04-12", Some((1965, 1985))),
            ("1985-04-12/", Some((1985, 2005))),
            ("-1985", Some((-1985, -1985))),
            // EDTF level 2 (the common parts)
            ("156X-12-25", Some((1560, 1569))),
            ("15XX-12-25", Some((1500, 1599))),
            ("1XXX-XX", Some((1000, 1999))),
            ("2004-06-~11", Some((2004, 2004))),
            ("?2004-06-~11", Some((2004, 2004))),
            ("2004-?06-11", Some((2004, 2004))),
            ("[1667, 1668, 1670..1672]", Some((1667, 1672))),
            ("[..1760-12-03]", Some((1740, 1760))),
            ("[1760-12..]", Some((1760, 1780))),
            ("{1667,1668, 1670..1672}", Some((1667, 1672))),
            ("[1540..1550]", Some((1540, 1550))),
            ("154X", Some((1540, 1549))),
            ("1540~", Some((1535, 1545))),
            ("1540?", Some((1540, 1540))),
            ("1540/1550", Some((1540, 1550))),
            // ISO year-month is not a range; an en dash or the full year makes one.
            ("1923-04", Some((1923, 1923))),
            ("1598-03", Some((1598, 1598))),
            ("1911-12", Some((1911, 1912))),
            ("2004-06", Some((2004, 2006))),
            ("2004-06?", Some((2004, 2004))),
            ("-1540s", Some((-1540, -1531))),
            ("fin XVIe siècle", Some((1566, 1599))),
            ("inizio XVI secolo", Some((1500, 1533))),
            ("1923–24", Some((1923, 1924))),
            ("1923-1924", Some((1923, 1924))),
            ("1550-75", Some((1550, 1575))),
            ("1921-24", Some((1921, 1924))),
            // The trade's own forms
            ("c. 1540-1550", Some((1535, 1555))),
            ("c. 1540–1550", Some((1535, 1555))),
            ("ca. 1540/50", Some((1535, 1555))),
            ("ca 1540", Some((1535, 1545))),
            ("circa 1540", Some((1535, 1545))),
            ("approx. 1540", Some((1535, 1545))),
            ("um 1540", Some((1535, 1545))),
            ("Um 1540/50", Some((1535, 1555))),
            ("vers 1540", Some((1535, 1545))),
            ("env. 1540", Some((1535, 1545))),
            ("[1540]", Some((1540, 1540))),
            ("[ca. 1540]", Some((1535, 1545))),
            ("1540 (?)", Some((1540, 1540))),
            ("1540(?)", Some((1540, 1540))),
            ("16th-17th century", Some((1500, 1699))),
            ("16th–17th centuries", Some((1500, 1699))),
            ("16th to 17th century", Some((1500, 1699))),
            ("early 16th century", Some((1500, 1533))),
            ("16. Jh.", Some((1500, 1599))),
            ("16. Jahrhundert", Some((1500, 1599))),
            ("Anfang 16. Jh.", Some((1500, 1533))),
            ("Mitte des 16. Jahrhunderts", Some((1533, 1566))),
            ("Mitte 16. Jh.", Some((1533, 1566))),
            ("Ende 16. Jh.", Some((1566, 1599))),
            ("1. Hälfte 16. Jh.", Some((1500, 1549))),
            ("2. Hälfte des 16. Jh.", Some((1550, 1599))),
            ("16./17. Jh.", Some((1500, 1699))),
            ("XVIe siècle", Some((1500, 1599))),
            ("XVIe s.", Some((1500, 1599))),
            ("xvième siècle", Some((1500, 1599))),
            ("début du XVIe siècle", Some((1500, 1533))),
            ("fin du XVIe siècle", Some((1566, 1599))),
            ("seconde moitié du XVIe siècle", Some((1550, 1599))),
            ("XVIe-XVIIe siècle", Some((1500, 1699))),
            ("sec. XVI", Some((1500, 1599))),
            ("secolo XVI", Some((1500, 1599))),
            ("XVI secolo", Some((1500, 1599))),
            ("16e eeuw", Some((1500, 1599))),
            ("16de eeuw", Some((1500, 1599))),
            ("1540s", Some((1540, 1549))),
            ("1540's", Some((1540, 1549))),
            ("1540er Jahre", Some((1540, 1549))),
            ("vor 1600", Some((1580, 1600))),
            ("nach 1600", Some((1600, 1620))),
            ("avant 1600", Some((1580, 1600))),
            ("après 1600", Some((1600, 1620))),
            ("1550 bis 1575", Some((1550, 1575))),
            ("1550 à 1575", Some((1550, 1575))),
            ("450 v. Chr.", Some((-450, -450))),
            ("AD 450", Some((450, 450))),
            // 13 is no month: a range.
            ("1985-13", Some((1985, 2013))),
            // Not datings, among them a number column's values
            ("50%", None),
            ("~30", None),
            ("[12, 40, 200, 300]", None),
            ("[12]", None),
            ("XVIIII siècle", None),
            ("31st century", None),
            ("summer", None),
            ("1540-1530", None),
            ("c.", None),
            ("[]", None),
            ("../..", None),
        ];
        assert!(table.len() >= 60);
        let mut wrong = Vec::new();
        for &(written, want) in table {
            let got = parse_date(written).map(|r| (r.start, r.end));
            if got != want {
                wrong.push(format!("{written:?}: {got:?}, want {want:?}"));
            }
        }
        assert!(wrong.is_empty(), "{}", wrong.join("\n"));
        // A year beyond the bound says so.
        assert!(beyond_years("Y170000002"));
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
