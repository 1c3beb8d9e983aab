//! Small helpers shared by the site and the import: reading values out of a part's
//! group tree, time stamps, HTML escaping.

use tendline_store::{Attr, Data, Group};

/// The group at a `/`-separated path below `g`.
pub fn group_at<'a>(g: &'a Group, path: &str) -> Option<&'a Group> {
    path.split('/')
        .filter(|s| !s.is_empty())
        .try_fold(g, |g, s| g.groups.get(s))
}

/// The dataset `name` at a `/`-separated path (`windows/medians/000/qt_ms`).
pub fn data_at<'a>(g: &'a Group, path: &str) -> Option<&'a Data> {
    let (dir, name) = path.rsplit_once('/').unwrap_or(("", path));
    group_at(g, dir)?.datasets.get(name).map(|d| &d.data)
}

pub fn i64s<'a>(g: &'a Group, path: &str) -> Option<&'a [i64]> {
    match data_at(g, path)? {
        Data::I64(v) => Some(v),
        _ => None,
    }
}

/// Numbers of any numeric 1-D dataset as f64.
pub fn f64s(g: &Group, path: &str) -> Option<Vec<f64>> {
    match data_at(g, path)? {
        Data::F64(v) => Some(v.clone()),
        Data::F32(v) => Some(v.iter().map(|&x| x as f64).collect()),
        Data::I64(v) => Some(v.iter().map(|&x| x as f64).collect()),
        _ => None,
    }
}

pub fn texts<'a>(g: &'a Group, path: &str) -> Option<&'a [String]> {
    match data_at(g, path)? {
        Data::Text(v) => Some(v),
        _ => None,
    }
}

pub fn attr_f64(g: &Group, name: &str) -> Option<f64> {
    match g.attrs.get(name)? {
        Attr::Float(v) => Some(*v),
        Attr::Int(v) => Some(*v as f64),
        _ => None,
    }
}

pub fn attr_text<'a>(g: &'a Group, name: &str) -> Option<&'a str> {
    match g.attrs.get(name)? {
        Attr::Text(v) => Some(v),
        _ => None,
    }
}

pub fn attr_texts<'a>(g: &'a Group, name: &str) -> Option<&'a [String]> {
    match g.attrs.get(name)? {
        Attr::Texts(v) => Some(v),
        _ => None,
    }
}

/// Median of the finite values (the same even-count convention as the measurement stage).
pub fn median_finite(v: impl Iterator<Item = f64>) -> f64 {
    let mut v: Vec<f64> = v.filter(|x| x.is_finite()).collect();
    tendline_measure::align::median(&mut v)
}

pub use tendline_store::utc_now;

/// `YYYY-MM-DDTHH:MM:SS[.fff]Z` with plausible field ranges (what browsers'
/// `Date.toISOString()` writes).
pub fn is_iso_utc(s: &str) -> bool {
    let b = s.as_bytes();
    if !s.is_ascii() || b.len() < 20 || !s.ends_with('Z') {
        return false;
    }
    let digits = |r: std::ops::Range<usize>| b[r].iter().all(u8::is_ascii_digit);
    let num = |r: std::ops::Range<usize>| s[r].parse::<u32>().unwrap_or(99);
    let frac_ok = match &s[19..s.len() - 1] {
        "" => true,
        f => f.len() >= 2 && f.starts_with('.') && f[1..].bytes().all(|c| c.is_ascii_digit()),
    };
    digits(0..4)
        && b[4] == b'-'
        && digits(5..7)
        && b[7] == b'-'
        && digits(8..10)
        && b[10] == b'T'
        && digits(11..13)
        && b[13] == b':'
        && digits(14..16)
        && b[16] == b':'
        && digits(17..19)
        && (1..=12).contains(&num(5..7))
        && (1..=31).contains(&num(8..10))
        && num(11..13) < 24
        && num(14..16) < 60
        && num(17..19) < 61
        && frac_ok
}

/// Escape text for HTML element content and attribute values.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            c => o.push(c),
        }
    }
    o
}

/// A number for a table cell: `—` when missing.
pub fn ms(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.0}")
    } else {
        "—".into()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tendline_store::iso_from_unix;

    #[test]
    fn iso_time_known_dates() {
        // 2000-03-01 is day 11017 after 1970-01-01 (proleptic Gregorian calendar).
        assert_eq!(
            iso_from_unix(11_017 * 86_400 + 3661),
            "2000-03-01T01:01:01Z"
        );
        assert_eq!(iso_from_unix(0), "1970-01-01T00:00:00Z");
        assert!(is_iso_utc(&utc_now()));
    }

    #[test]
    fn iso_check() {
        assert!(is_iso_utc("2026-12-02T08:00:00Z"));
        assert!(is_iso_utc("2026-12-02T08:00:00.123Z"));
        assert!(!is_iso_utc("2026-12-02 08:00:00"));
        assert!(!is_iso_utc("2026-13-02T08:00:00Z"));
        assert!(!is_iso_utc("yesterday"));
    }

    #[test]
    fn escaping() {
        assert_eq!(
            esc("<a href=\"x\">&'"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }
}
