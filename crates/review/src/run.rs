//! Reading a run directory: `run.json`, the part files and the run's measurement
//! configuration.

use crate::ReviewError;
use serde::Deserialize;
use std::path::{Path, PathBuf};
use tendline_measure::MeasureConfig;
use tendline_store::Part;

/// One record line of `run.json`.
#[derive(Debug, Clone, Deserialize)]
pub struct RunRecord {
    pub record: String,
    #[serde(default)]
    pub path: Option<String>,
    #[serde(default)]
    pub status: Option<String>,
}

#[derive(Debug, Clone, Deserialize)]
struct RunJson {
    records: Vec<RunRecord>,
    #[serde(default)]
    config_toml: Option<String>,
}

/// A run directory as the review needs it.
#[derive(Debug, Clone)]
pub struct Run {
    pub dir: PathBuf,
    pub records: Vec<RunRecord>,
    pub config_toml: Option<String>,
}

impl Run {
    pub fn load(dir: &Path) -> Result<Run, ReviewError> {
        let path = dir.join("run.json");
        let bytes = std::fs::read(&path).map_err(|source| ReviewError::Io {
            path: path.clone(),
            source,
        })?;
        let j: RunJson = serde_json::from_slice(&bytes).map_err(|e| ReviewError::Invalid {
            path: path.clone(),
            message: format!("not a tendline run.json: {e}"),
        })?;
        Ok(Run {
            dir: dir.to_path_buf(),
            records: j.records,
            config_toml: j.config_toml,
        })
    }

    pub fn part_path(&self, record: &str) -> PathBuf {
        self.dir.join("parts").join(format!("{record}.json"))
    }

    /// The part of `record`; `None` when the record has no part (failed record).
    pub fn part(&self, record: &str) -> Result<Option<Part>, ReviewError> {
        // A record name from a corrections file must not walk out of `parts/`.
        if record.is_empty() || record.contains(['/', '\\']) || record.starts_with('.') {
            return Ok(None);
        }
        Ok(Part::load(&self.part_path(record))?)
    }

    /// The `[measure]` table of the run's configuration (defaults where a key is absent).
    pub fn measure_config(&self) -> Result<MeasureConfig, ReviewError> {
        let path = self.dir.join("run.json");
        let invalid = |message: String| ReviewError::Invalid {
            path: path.clone(),
            message,
        };
        let text = self.config_toml.as_deref().ok_or_else(|| {
            invalid("no config_toml: cannot tell the run's QT rule and limits".into())
        })?;
        let v: toml::Value =
            toml::from_str(text).map_err(|e| invalid(format!("config_toml: {e}")))?;
        let cfg: MeasureConfig = match v.get("measure") {
            Some(m) => m
                .clone()
                .try_into()
                .map_err(|e| invalid(format!("config_toml [measure]: {e}")))?,
            None => MeasureConfig::default(),
        };
        cfg.validate().map_err(|e| {
            invalid(format!(
                "config_toml [measure]: {}",
                e.iter()
                    .map(|e| e.to_string())
                    .collect::<Vec<_>>()
                    .join("; ")
            ))
        })?;
        Ok(cfg)
    }

    /// Where the input record file of `rec` is: as written, else relative to the run
    /// directory and its parent (runs store the path as given on the command line).
    pub fn input_path(&self, rec: &RunRecord) -> Option<PathBuf> {
        let p = PathBuf::from(rec.path.as_deref()?);
        if p.is_absolute() {
            return p.is_file().then_some(p);
        }
        let mut cands = vec![p.clone(), self.dir.join(&p)];
        if let Some(parent) = self.dir.parent() {
            cands.push(parent.join(&p));
        }
        cands.into_iter().find(|c| c.is_file())
    }
}
