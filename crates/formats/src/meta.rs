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
    /// Subject identifier (from a subjects CSV), linking serial records.
    pub subject: Option<String>,
    /// Timepoint label (e.g. `baseline`, `post-dose`), from a subjects CSV.
    pub timepoint: Option<String>,
    /// Free-text comment lines from the input header.
    pub comments: Vec<String>,
}
