//! Shared vocabulary for validating stage parameters.
//!
//! Every stage crate owns a config struct that is deserialized from its table of
//! `pipeline.toml`. After deserialization each stage checks value ranges with the
//! helpers here, so that every error names the key (dotted path), the allowed
//! values and what was received, in one consistent wording.

use std::fmt;

/// A parameter outside its allowed set, named by its dotted key in `pipeline.toml`.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("invalid value for `{key}`: allowed {allowed}, got {got}")]
pub struct ParamError {
    /// Dotted path of the key, e.g. `detect.refractory_ms`.
    pub key: String,
    /// Human description of the allowed values, e.g. `100 to 400 (ms)`.
    pub allowed: String,
    /// The value received, rendered as text.
    pub got: String,
}

/// Collects violations so a user sees every bad value in one run, not one per run.
#[derive(Debug, Default)]
pub struct Checker {
    prefix: String,
    errors: Vec<ParamError>,
}

impl Checker {
    /// A checker whose keys are reported under `prefix` (the TOML table name).
    pub fn new(prefix: &str) -> Self {
        Self {
            prefix: prefix.to_string(),
            errors: Vec::new(),
        }
    }

    fn key(&self, name: &str) -> String {
        if self.prefix.is_empty() {
            name.to_string()
        } else {
            format!("{}.{}", self.prefix, name)
        }
    }

    /// Require `lo <= value <= hi` (and finite); `unit` is appended to the message.
    pub fn range(&mut self, name: &str, value: f64, lo: f64, hi: f64, unit: &str) -> &mut Self {
        if !(value.is_finite() && value >= lo && value <= hi) {
            let unit = if unit.is_empty() {
                String::new()
            } else {
                format!(" ({unit})")
            };
            self.errors.push(ParamError {
                key: self.key(name),
                allowed: format!("{lo} to {hi}{unit}"),
                got: value.to_string(),
            });
        }
        self
    }

    /// Require `value` to be one of `allowed`.
    pub fn one_of<T: PartialEq + fmt::Display>(
        &mut self,
        name: &str,
        value: &T,
        allowed: &[T],
    ) -> &mut Self {
        if !allowed.contains(value) {
            let list: Vec<String> = allowed.iter().map(|a| a.to_string()).collect();
            self.errors.push(ParamError {
                key: self.key(name),
                allowed: format!("one of {}", list.join(", ")),
                got: value.to_string(),
            });
        }
        self
    }

    /// Require a relation between two keys, e.g. a low cut below a high cut.
    pub fn require(
        &mut self,
        ok: bool,
        name: &str,
        allowed: &str,
        got: impl fmt::Display,
    ) -> &mut Self {
        if !ok {
            self.errors.push(ParamError {
                key: self.key(name),
                allowed: allowed.to_string(),
                got: got.to_string(),
            });
        }
        self
    }

    /// Merge the violations of a nested table's checker.
    pub fn extend(&mut self, other: Checker) -> &mut Self {
        self.errors.extend(other.errors);
        self
    }

    /// All violations found so far.
    pub fn finish(self) -> Result<(), Vec<ParamError>> {
        if self.errors.is_empty() {
            Ok(())
        } else {
            Err(self.errors)
        }
    }
}

/// The known name closest to `unknown` (Jaro-Winkler ≥ 0.7), for "did you mean" hints.
pub fn closest<'a>(unknown: &str, known: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    known
        .into_iter()
        .map(|k| (k, strsim::jaro_winkler(unknown, k)))
        .filter(|(_, s)| *s >= 0.7)
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(k, _)| k)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn range_error_names_key_range_and_value() {
        let mut c = Checker::new("detect");
        c.range("refractory_ms", 50.0, 100.0, 400.0, "ms");
        let e = c.finish().unwrap_err();
        assert_eq!(e.len(), 1);
        let msg = e[0].to_string();
        assert!(msg.contains("detect.refractory_ms"), "{msg}");
        assert!(msg.contains("100 to 400 (ms)"), "{msg}");
        assert!(msg.contains("got 50"), "{msg}");
    }

    #[test]
    fn nan_is_out_of_any_range() {
        let mut c = Checker::new("");
        c.range("x", f64::NAN, 0.0, 1.0, "");
        assert!(c.finish().is_err());
    }

    #[test]
    fn closest_match_suggests_typo_fix() {
        let known = ["refractory_ms", "search_back", "t_wave_window_ms"];
        assert_eq!(closest("refractry_ms", known), Some("refractory_ms"));
        assert_eq!(closest("zzzz", known), None);
    }
}
