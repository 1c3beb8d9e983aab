//! The run's configuration: `pipeline.toml` plus command-line overrides, validated
//! into one typed [`PipelineConfig`] before any record is touched.
//!
//! Errors name the key (dotted path), the allowed values and what was received;
//! an unknown key also gets the closest known key as a suggestion.

use anyhow::{anyhow, bail, Context, Result};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::path::Path;
use tendline_params::{closest, ParamError};

/// The default configuration, the same text as `pipeline.toml` at the repository root.
pub const DEFAULT_TOML: &str = include_str!("../../../pipeline.toml");

/// Every parameter of every stage.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct PipelineConfig {
    pub filter: tendline_dsp::filter::FilterConfig,
    pub detect: tendline_detect::DetectConfig,
    pub delineate: tendline_delineate::DelineateConfig,
    pub measure: tendline_measure::MeasureConfig,
}

impl PipelineConfig {
    /// Range checks of every stage, all violations at once.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut errs = Vec::new();
        for r in [
            self.filter.validate(),
            self.detect.validate(),
            self.delineate.validate(),
            self.measure.validate(),
        ] {
            if let Err(e) = r {
                errs.extend(e);
            }
        }
        if errs.is_empty() {
            Ok(())
        } else {
            Err(errs)
        }
    }

    /// Canonical TOML text of the effective configuration (stored with results).
    pub fn to_toml(&self) -> String {
        toml::to_string(self).expect("config serializes")
    }

    /// SHA-256 (hex) of [`Self::to_toml`].
    pub fn sha256(&self) -> String {
        hex::encode(Sha256::digest(self.to_toml().as_bytes()))
    }
}

/// Walk `user` against the key tree of the defaults and report keys that do not exist.
fn unknown_keys(user: &toml::Value, known: &toml::Value, prefix: &str, out: &mut Vec<String>) {
    let (Some(u), Some(k)) = (user.as_table(), known.as_table()) else {
        return;
    };
    for (key, val) in u {
        let path = if prefix.is_empty() {
            key.clone()
        } else {
            format!("{prefix}.{key}")
        };
        match k.get(key) {
            Some(kv) => unknown_keys(val, kv, &path, out),
            None => {
                let hint = closest(key, k.keys().map(String::as_str))
                    .map(|c| {
                        let p = if prefix.is_empty() {
                            c.to_string()
                        } else {
                            format!("{prefix}.{c}")
                        };
                        format!(" (did you mean `{p}`?)")
                    })
                    .unwrap_or_default();
                let allowed: Vec<&str> = k.keys().map(String::as_str).collect();
                out.push(format!(
                    "unknown key `{path}`{hint}; keys allowed here: {}",
                    allowed.join(", ")
                ));
            }
        }
    }
}

/// Set `dotted.key = value` in a TOML tree; the value is parsed as TOML, else taken as a string.
fn apply_override(root: &mut toml::Value, assignment: &str) -> Result<()> {
    let (key, raw) = assignment.split_once('=').ok_or_else(|| {
        anyhow!("--set expects KEY=VALUE (e.g. detect.refractory_ms=200), got `{assignment}`")
    })?;
    let key = key.trim();
    let raw = raw.trim();
    let value: toml::Value = toml::from_str::<toml::Table>(&format!("v = {raw}"))
        .ok()
        .and_then(|mut t| t.remove("v"))
        .unwrap_or_else(|| toml::Value::String(raw.to_string()));
    let mut node = root;
    let parts: Vec<&str> = key.split('.').collect();
    for (i, p) in parts.iter().enumerate() {
        let table = node
            .as_table_mut()
            .ok_or_else(|| anyhow!("--set {key}: `{}` is not a table", parts[..i].join(".")))?;
        if i + 1 == parts.len() {
            table.insert((*p).to_string(), value);
            return Ok(());
        }
        node = table
            .entry((*p).to_string())
            .or_insert_with(|| toml::Value::Table(Default::default()));
    }
    bail!("--set: empty key in `{assignment}`")
}

/// Build the validated config from TOML text (`origin` names it in errors) and overrides.
pub fn load_from_str(text: &str, origin: &str, overrides: &[String]) -> Result<PipelineConfig> {
    let mut tree: toml::Value = toml::from_str::<toml::Table>(text)
        .map(toml::Value::Table)
        .with_context(|| format!("{origin}: not valid TOML"))?;
    for o in overrides {
        apply_override(&mut tree, o)?;
    }
    // A bad value may come from the file or from a --set: name both.
    let label = if overrides.is_empty() {
        origin.to_string()
    } else {
        format!("{origin} with --set {}", overrides.join(", --set "))
    };
    let origin = label.as_str();
    let known = toml::Value::try_from(PipelineConfig::default()).expect("defaults serialize");
    let mut unknown = Vec::new();
    unknown_keys(&tree, &known, "", &mut unknown);
    if !unknown.is_empty() {
        bail!("{origin}: {}", unknown.join("\n  "));
    }
    let cfg: PipelineConfig = tree
        .try_into()
        .map_err(|e: toml::de::Error| anyhow!("{origin}: {}", e.to_string().trim()))?;
    if let Err(errs) = cfg.validate() {
        let lines: Vec<String> = errs.iter().map(|e| e.to_string()).collect();
        bail!("{origin}: {}", lines.join("\n  "));
    }
    Ok(cfg)
}

/// Load `path` (or the embedded defaults when `None`) and apply overrides.
pub fn load(path: Option<&Path>, overrides: &[String]) -> Result<PipelineConfig> {
    match path {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .with_context(|| format!("--config {}: cannot read", p.display()))?;
            load_from_str(&text, &p.display().to_string(), overrides)
        }
        None => load_from_str(DEFAULT_TOML, "built-in pipeline.toml", overrides),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shipped_pipeline_toml_equals_the_compiled_defaults() {
        // pipeline.toml documents every default; drift between the two would mislead users.
        let from_file = load_from_str(DEFAULT_TOML, "pipeline.toml", &[]).unwrap();
        assert_eq!(from_file.to_toml(), PipelineConfig::default().to_toml());
    }

    fn check_documented(table: &str, v: &toml::Value, lines: &[&str], missing: &mut Vec<String>) {
        for (key, val) in v.as_table().unwrap() {
            let path = format!("{table}.{key}");
            if val.is_table() {
                if !lines.iter().any(|l| l.trim() == format!("[{path}]")) {
                    missing.push(format!("[{path}]: table absent"));
                }
                check_documented(&path, val, lines, missing);
                continue;
            }
            let needle = format!("{key} =");
            // The key inside its own table: search after the table header.
            let start = lines
                .iter()
                .position(|l| l.trim() == format!("[{table}]"))
                .unwrap_or(0);
            let Some(idx) = lines[start..]
                .iter()
                .position(|l| l.trim_start().starts_with(&needle))
                .map(|i| i + start)
            else {
                missing.push(format!("{path}: absent"));
                continue;
            };
            // The meaning and unit comment sits on the line itself or just above.
            let above = if idx > 0 { lines[idx - 1] } else { "" };
            if !lines[idx].contains('#') && !above.trim_start().starts_with('#') {
                missing.push(format!("{path}: no comment"));
            }
        }
    }

    #[test]
    fn every_default_key_is_in_pipeline_toml_with_a_comment() {
        let known = toml::Value::try_from(PipelineConfig::default()).unwrap();
        let lines: Vec<&str> = DEFAULT_TOML.lines().collect();
        let mut missing = Vec::new();
        for (table, v) in known.as_table().unwrap() {
            check_documented(table, v, &lines, &mut missing);
        }
        assert!(missing.is_empty(), "{missing:#?}");
    }

    #[test]
    fn unknown_key_is_named_with_a_close_match() {
        let e = load_from_str("[filter]\nhighpas_hz = 0.5\n", "x.toml", &[])
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("filter.highpas_hz") && e.contains("did you mean `filter.highpass_hz`"),
            "{e}"
        );
        let e = load_from_str("[filtr]\n", "x.toml", &[])
            .unwrap_err()
            .to_string();
        assert!(e.contains("did you mean `filter`"), "{e}");
    }

    #[test]
    fn wrong_type_names_key() {
        let e = load_from_str("[filter]\nhighpass_hz = \"fast\"\n", "x.toml", &[])
            .unwrap_err()
            .to_string();
        assert!(e.contains("x.toml") && e.contains("highpass_hz"), "{e}");
    }

    #[test]
    fn out_of_range_names_key_range_and_value() {
        let e = load_from_str("", "x.toml", &["filter.highpass_hz=-3".into()])
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("filter.highpass_hz")
                && e.contains("got -3")
                && e.contains("x.toml with --set filter.highpass_hz=-3"),
            "{e}"
        );
    }

    #[test]
    fn override_sets_nested_value() {
        let c = load_from_str("", "x.toml", &["filter.lowpass_hz=35".into()]).unwrap();
        assert_eq!(c.filter.lowpass_hz, 35.0);
    }
}
