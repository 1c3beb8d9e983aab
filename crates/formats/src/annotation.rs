//! WFDB annotation files (MIT format): read and write.

/// One WFDB annotation, with every field the format can carry.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Annotation {
    /// Sample index (absolute, 0-based); i64 because files may hold very large times.
    pub sample: i64,
    /// WFDB annotation code (anntyp), e.g. 1 = `N`, 39 = `(`, 40 = `)`.
    pub code: u8,
    pub subtype: i8,
    pub chan: u8,
    pub num: i8,
    /// Auxiliary bytes (often text), if any.
    pub aux: Option<Vec<u8>>,
}
