//! Subject metadata carried with a record: age, sex, subject id, timepoint.

/// Sex as recorded in the input (used for sex-specific QTc limits).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Sex {
    Male,
    Female,
}

impl Sex {
    /// One-letter code `M` or `F`.
    pub fn code(self) -> &'static str {
        match self {
            Sex::Male => "M",
            Sex::Female => "F",
        }
    }
}

/// Metadata attached to a record; every field optional.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Metadata {
    /// Age in years.
    pub age: Option<f64>,
    pub sex: Option<Sex>,
    /// Subject identifier (from a subjects CSV, or an aECG `trialSubject/id`), linking
    /// serial records.
    pub subject: Option<String>,
    /// Timepoint label (e.g. `baseline`, `post-dose`), from a subjects CSV.
    pub timepoint: Option<String>,
    /// Treatment arm (e.g. `drug`, `placebo`), from a subjects CSV.
    pub arm: Option<String>,
    /// Free-text comment lines from the input header.
    pub comments: Vec<String>,
}

impl Sex {
    /// Parse `M`, `F`, `male`, `female` (any case).
    pub fn parse(s: &str) -> Option<Sex> {
        match s.trim().to_ascii_lowercase().as_str() {
            "m" | "male" => Some(Sex::Male),
            "f" | "female" => Some(Sex::Female),
            _ => None,
        }
    }
}

fn parse_age(s: &str) -> Option<f64> {
    let v: f64 = s.trim().parse().ok()?;
    (v.is_finite() && (0.0..=150.0).contains(&v)).then_some(v)
}

/// Age and sex found in one header comment line (text after `#`).
///
/// Conventions found in `../shared/data` and in WFDB conformance headers:
/// - `<age>: 51`, `<sex>: F`, also several on one line
///   (`<age>: 25  <sex>: M  <diagnoses>: …`) — LUDB and others;
/// - `Age: 52  Sex: M`, `age: 81`, `sex: female` — European ST-T and others;
/// - `69 M 1085 1629 x1` — age then sex letter at the start of the line, MIT-BIH
///   arrhythmia database (and its QTDB excerpts).
pub fn age_sex_of_line(line: &str) -> (Option<f64>, Option<Sex>) {
    let (mut age, mut sex) = (None, None);
    let toks: Vec<&str> = line.split_whitespace().collect();
    // Key-value conventions: a token `<age>:`/`age:` followed by the value.
    for (i, t) in toks.iter().enumerate() {
        let key = t
            .trim_end_matches(':')
            .trim_start_matches('<')
            .trim_end_matches('>');
        if !t.ends_with(':') {
            continue;
        }
        let val = toks.get(i + 1).copied().unwrap_or("");
        match key.to_ascii_lowercase().as_str() {
            "age" if age.is_none() => age = parse_age(val),
            "sex" | "gender" if sex.is_none() => sex = Sex::parse(val),
            _ => {}
        }
    }
    // MIT-BIH convention: `<age> <M|F> ...` at the start of the line.
    if age.is_none() && sex.is_none() && toks.len() >= 2 {
        if let (Some(a), Some(s)) = (parse_age(toks[0]), Sex::parse(toks[1])) {
            if toks[1].len() == 1 {
                age = Some(a);
                sex = Some(s);
            }
        }
    }
    (age, sex)
}

impl Metadata {
    /// Metadata from header comment lines: the first age and sex found by
    /// [`age_sex_of_line`]; all lines are kept in `comments`.
    pub fn from_comments(comments: &[String]) -> Metadata {
        let mut m = Metadata {
            comments: comments.to_vec(),
            ..Metadata::default()
        };
        for c in comments {
            let (a, s) = age_sex_of_line(c);
            m.age = m.age.or(a);
            m.sex = m.sex.or(s);
        }
        m
    }
}

/// Age in completed years at `ecg` for a birth date `birth` (year, month, day);
/// `None` outside 0 to 150 years.
pub(crate) fn age_years(birth: (i32, u32, u32), ecg: (i32, u32, u32)) -> Option<f64> {
    let mut years = ecg.0 - birth.0;
    if (ecg.1, ecg.2) < (birth.1, birth.2) {
        years -= 1;
    }
    (0..=150).contains(&years).then_some(years as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn conventions() {
        // QTDB sel100 / MIT-BIH record 100 header comment.
        assert_eq!(
            age_sex_of_line("69 M 1085 1629 x1"),
            (Some(69.0), Some(Sex::Male))
        );
        // LUDB record 1 header comments.
        assert_eq!(age_sex_of_line("<age>: 51"), (Some(51.0), None));
        assert_eq!(age_sex_of_line("<sex>: F"), (None, Some(Sex::Female)));
        // European ST-T (QTDB sele0107) header comment.
        assert_eq!(
            age_sex_of_line("Age: 52  Sex: M"),
            (Some(52.0), Some(Sex::Male))
        );
        // WFDB conformance headers (test01_00s, s0010_re).
        assert_eq!(
            age_sex_of_line("<age>: 25  <sex>: M  <diagnoses>: (none)"),
            (Some(25.0), Some(Sex::Male))
        );
        assert_eq!(age_sex_of_line("sex: female"), (None, Some(Sex::Female)));
        assert_eq!(age_sex_of_line("<age>: ?? <sex>: ?"), (None, None));
        assert_eq!(age_sex_of_line("Aldomet, Inderal"), (None, None));
        assert_eq!(age_sex_of_line("12 Monkeys"), (None, None));
    }

    #[test]
    fn from_comments_takes_first() {
        let c: Vec<String> = ["Produced by xform", "<age>: 51", "<sex>: F", "<age>: 60"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let m = Metadata::from_comments(&c);
        assert_eq!((m.age, m.sex), (Some(51.0), Some(Sex::Female)));
        assert_eq!(m.comments.len(), 4);
    }
}
