//! The search-space file: which `pipeline.toml` keys to tune over which
//! values, with which strategy and objective (format in the crate docs).
//!
//! Parsing checks everything before any record is read: unknown keys are
//! named with the closest known key, and every range end and list value is
//! applied to the base configuration and run through the stages' own
//! `validate()`, so a value outside a stage's allowed range gets the same
//! named-key message as in `pipeline.toml`.

use crate::objective::Objective;
use crate::TuneError;
use serde::Deserialize;
use tendline_delineate::DelineateConfig;
use tendline_detect::DetectConfig;
use tendline_dsp::filter::FilterConfig;
use tendline_params::{closest, ParamError};

/// How candidates are generated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Strategy {
    /// Every combination of the parameters' grids.
    Grid,
    /// `candidates` seeded draws (the base configuration is the first).
    #[default]
    Random,
    /// Coordinate descent: one parameter at a time over its grid, the grid
    /// then narrowed around the best value, for `rounds` passes.
    Coordinate,
}

impl Strategy {
    /// Name as written in the space file.
    pub fn name(self) -> &'static str {
        match self {
            Strategy::Grid => "grid",
            Strategy::Random => "random",
            Strategy::Coordinate => "coordinate",
        }
    }
}

/// The `[search]` table.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SearchOptions {
    /// `grid`, `random` or `coordinate`.
    pub strategy: Strategy,
    /// Random search: number of candidates, the base configuration included.
    pub candidates: usize,
    /// Seed of the random draws and of the fold assignment.
    pub seed: u64,
    /// Grid and coordinate descent: points per range parameter (ends included).
    pub steps: usize,
    /// Coordinate descent: passes over all parameters.
    pub rounds: usize,
    /// Number of cross-validation folds (records are split, never beats).
    pub folds: usize,
    /// A grid with more candidates than this is refused.
    pub max_candidates: usize,
}

impl Default for SearchOptions {
    fn default() -> Self {
        SearchOptions {
            strategy: Strategy::Random,
            candidates: 100,
            seed: 1,
            steps: 5,
            rounds: 2,
            folds: 5,
            max_candidates: 10_000,
        }
    }
}

/// Values one parameter may take.
#[derive(Debug, Clone, PartialEq)]
pub enum Domain {
    /// Numbers from `min` to `max`; `integer` for integer keys; `log` spaces
    /// grids and draws evenly in log(value). `steps` overrides the search's.
    Range {
        min: f64,
        max: f64,
        log: bool,
        integer: bool,
        steps: Option<usize>,
    },
    /// Exactly these values (numbers, booleans or strings).
    List(Vec<toml::Value>),
}

/// One tuned key.
#[derive(Debug, Clone, PartialEq)]
pub struct Param {
    /// Dotted key in `pipeline.toml`, e.g. `delineate.t_xi_end`.
    pub key: String,
    pub domain: Domain,
    /// Value in the base configuration.
    pub base: toml::Value,
}

impl Param {
    /// The grid of this parameter with `steps` points for ranges.
    pub fn grid(&self, default_steps: usize) -> Vec<toml::Value> {
        match &self.domain {
            Domain::List(v) => v.clone(),
            Domain::Range {
                min,
                max,
                log,
                integer,
                steps,
            } => range_grid(*min, *max, *log, *integer, steps.unwrap_or(default_steps)),
        }
    }

    /// Turn a number into this parameter's value type (rounded for integers,
    /// four significant digits for floats so tables stay readable).
    pub fn number(&self, x: f64) -> toml::Value {
        match &self.domain {
            Domain::Range { integer: true, .. } => toml::Value::Integer(x.round() as i64),
            _ => toml::Value::Float(round_sig(x, 4)),
        }
    }

    /// A numeric view of a value (booleans 0/1; strings: position in the list).
    pub fn as_number(&self, v: &toml::Value) -> Option<f64> {
        match v {
            toml::Value::Float(f) => Some(*f),
            toml::Value::Integer(i) => Some(*i as f64),
            toml::Value::Boolean(b) => Some(f64::from(u8::from(*b))),
            _ => match &self.domain {
                Domain::List(l) => l.iter().position(|x| x == v).map(|p| p as f64),
                Domain::Range { .. } => None,
            },
        }
    }
}

/// Round to `sig` significant digits.
pub fn round_sig(x: f64, sig: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let mag = x.abs().log10().floor() as i32;
    let f = 10f64.powi(sig - 1 - mag);
    (x * f).round() / f
}

/// `steps` values from `min` to `max`, ends included, deduplicated.
pub fn range_grid(min: f64, max: f64, log: bool, integer: bool, steps: usize) -> Vec<toml::Value> {
    let steps = steps.max(1);
    let mut out: Vec<toml::Value> = Vec::new();
    for i in 0..steps {
        let t = if steps == 1 {
            0.5
        } else {
            i as f64 / (steps - 1) as f64
        };
        let x = if log {
            (min.ln() + t * (max.ln() - min.ln())).exp()
        } else {
            min + t * (max - min)
        };
        let v = if integer {
            toml::Value::Integer(x.round() as i64)
        } else {
            toml::Value::Float(round_sig(x, 6))
        };
        if !out.contains(&v) {
            out.push(v);
        }
    }
    out
}

/// A parsed search space.
#[derive(Debug, Clone)]
pub struct SearchSpace {
    pub params: Vec<Param>,
    pub search: SearchOptions,
    pub objective: Objective,
    /// The complete base configuration the candidates are applied to.
    pub base: toml::Table,
}

/// One point of the space: a value per parameter, in [`SearchSpace::params`] order.
#[derive(Debug, Clone, PartialEq)]
pub struct Candidate(pub Vec<toml::Value>);

impl Candidate {
    /// A stable text key (equal candidates, equal keys).
    pub fn key(&self) -> String {
        self.0
            .iter()
            .map(|v| v.to_string())
            .collect::<Vec<_>>()
            .join("|")
    }
}

/// The stage configurations of one candidate, validated, plus its complete tree.
#[derive(Debug, Clone)]
pub struct TunedConfig {
    /// Every table of the configuration (what `pipeline.toml` gets).
    pub tree: toml::Table,
    pub filter: FilterConfig,
    pub detect: DetectConfig,
    pub delineate: DelineateConfig,
}

fn table_of<T: serde::de::DeserializeOwned>(tree: &toml::Table, name: &str) -> Result<T, String> {
    let v = tree
        .get(name)
        .cloned()
        .unwrap_or(toml::Value::Table(toml::Table::new()));
    v.try_into::<T>()
        .map_err(|e| format!("[{name}]: {}", e.to_string().trim()))
}

impl TunedConfig {
    /// Deserialize and validate the stage tables of `tree` (the `measure`
    /// table is carried along; it does not change the scored marks).
    pub fn from_tree(tree: toml::Table) -> Result<Self, TuneError> {
        let filter: FilterConfig = table_of(&tree, "filter").map_err(TuneError::Invalid)?;
        let detect: DetectConfig = table_of(&tree, "detect").map_err(TuneError::Invalid)?;
        let delineate: DelineateConfig =
            table_of(&tree, "delineate").map_err(TuneError::Invalid)?;
        let mut errs: Vec<ParamError> = Vec::new();
        for r in [filter.validate(), detect.validate(), delineate.validate()] {
            if let Err(e) = r {
                errs.extend(e);
            }
        }
        if !errs.is_empty() {
            return Err(TuneError::Config(errs));
        }
        Ok(TunedConfig {
            tree,
            filter,
            detect,
            delineate,
        })
    }

    /// Key of everything upstream of the wavelet delineation (filter,
    /// detection, analysis rate): candidates with equal keys share the cached
    /// conditioned, detected and transformed record.
    pub fn upstream_key(&self) -> String {
        format!(
            "{}\n{}\n{}",
            toml::to_string(&self.filter).unwrap_or_default(),
            toml::to_string(&self.detect).unwrap_or_default(),
            self.delineate.analysis_fs_hz
        )
    }
}

/// Set a dotted key in a tree (the key must exist: checked when parsing).
pub fn set_key(tree: &mut toml::Table, key: &str, v: toml::Value) {
    let parts: Vec<&str> = key.split('.').collect();
    let mut node = tree;
    for p in &parts[..parts.len() - 1] {
        node = node
            .entry((*p).to_string())
            .or_insert_with(|| toml::Value::Table(toml::Table::new()))
            .as_table_mut()
            .expect("parent of a tuned key is a table");
    }
    node.insert(parts[parts.len() - 1].to_string(), v);
}

fn get_key<'a>(tree: &'a toml::Table, key: &str) -> Option<&'a toml::Value> {
    let mut parts = key.split('.');
    let mut v = tree.get(parts.next()?)?;
    for p in parts {
        v = v.as_table()?.get(p)?;
    }
    Some(v)
}

fn leaf_keys(t: &toml::Table, prefix: &str, out: &mut Vec<String>) {
    for (k, v) in t {
        let path = if prefix.is_empty() {
            k.clone()
        } else {
            format!("{prefix}.{k}")
        };
        match v {
            toml::Value::Table(sub) => leaf_keys(sub, &path, out),
            _ => out.push(path),
        }
    }
}

fn hint(unknown: &str, known: &[String]) -> String {
    closest(unknown, known.iter().map(String::as_str))
        .map(|c| format!(" (did you mean `{c}`?)"))
        .unwrap_or_default()
}

const SPEC_KEYS: [&str; 5] = ["min", "max", "values", "scale", "steps"];

impl SearchSpace {
    /// Parse a space file's text; `origin` names it in errors, `base` is the
    /// complete configuration tree the candidates modify.
    pub fn parse(text: &str, origin: &str, base: &toml::Table) -> Result<Self, TuneError> {
        let err = |m: String| TuneError::Space {
            origin: origin.to_string(),
            message: m,
        };
        let root: toml::Table = toml::from_str(text)
            .map_err(|e| err(format!("not valid TOML: {}", e.to_string().trim())))?;
        let top = ["search", "objective", "params"];
        for k in root.keys() {
            if !top.contains(&k.as_str()) {
                let known: Vec<String> = top.iter().map(|s| s.to_string()).collect();
                return Err(err(format!(
                    "unknown table `{k}`{}; allowed: search, objective, params",
                    hint(k, &known)
                )));
            }
        }
        let search: SearchOptions = match root.get("search") {
            Some(v) => v
                .clone()
                .try_into()
                .map_err(|e: toml::de::Error| err(format!("[search]: {}", e.to_string().trim())))?,
            None => SearchOptions::default(),
        };
        let objective = match root.get("objective") {
            Some(v) => Objective::from_value(v).map_err(|m| err(format!("[objective]: {m}")))?,
            None => Objective::default(),
        };
        let mut known = Vec::new();
        leaf_keys(base, "", &mut known);
        let mut params = Vec::new();
        let Some(p) = root.get("params") else {
            return Err(err(
                "no [params] table: name at least one pipeline.toml key to tune, e.g. \
                 [params.delineate] t_xi_end = { min = 0.2, max = 0.7 }"
                    .into(),
            ));
        };
        let Some(p) = p.as_table() else {
            return Err(err("`params` must be a table".into()));
        };
        collect_params(p, "", base, &known, &mut params).map_err(err)?;
        if params.is_empty() {
            return Err(err("[params] names no parameter".into()));
        }
        let space = SearchSpace {
            params,
            search,
            objective,
            base: base.clone(),
        };
        space.check().map_err(err)?;
        Ok(space)
    }

    /// Ranges and values against the stages' allowed ranges; search options.
    fn check(&self) -> Result<(), String> {
        let s = &self.search;
        let mut bad = Vec::new();
        if s.steps < 2 {
            bad.push(format!(
                "[search] steps: allowed 2 or more, got {}",
                s.steps
            ));
        }
        if s.candidates < 1 {
            bad.push(format!(
                "[search] candidates: allowed 1 or more, got {}",
                s.candidates
            ));
        }
        if s.rounds < 1 {
            bad.push(format!(
                "[search] rounds: allowed 1 or more, got {}",
                s.rounds
            ));
        }
        if s.folds < 2 {
            bad.push(format!(
                "[search] folds: allowed 2 or more, got {}",
                s.folds
            ));
        }
        for p in &self.params {
            let tried: Vec<(String, toml::Value)> = match &p.domain {
                Domain::Range { min, max, .. } => vec![
                    ("min".into(), p.number(*min)),
                    ("max".into(), p.number(*max)),
                ],
                Domain::List(v) => v
                    .iter()
                    .enumerate()
                    .map(|(i, x)| (format!("values[{i}]"), x.clone()))
                    .collect(),
            };
            for (what, v) in tried {
                let mut tree = self.base.clone();
                set_key(&mut tree, &p.key, v.clone());
                if let Err(e) = TunedConfig::from_tree(tree) {
                    bad.push(format!("params.{} {what} = {v}: {e}", p.key));
                }
            }
        }
        if bad.is_empty() {
            Ok(())
        } else {
            Err(bad.join("\n  "))
        }
    }

    /// The base configuration as a candidate (its values, clamped into ranges;
    /// for lists the base value if listed, else the first).
    pub fn base_candidate(&self) -> Candidate {
        Candidate(
            self.params
                .iter()
                .map(|p| match &p.domain {
                    Domain::Range { min, max, .. } => {
                        let b = p.as_number(&p.base).unwrap_or(*min);
                        p.number(b.clamp(*min, *max))
                    }
                    Domain::List(v) => {
                        if v.contains(&p.base) {
                            p.base.clone()
                        } else {
                            v[0].clone()
                        }
                    }
                })
                .collect(),
        )
    }

    /// The configuration of a candidate (validated).
    pub fn config_for(&self, c: &Candidate) -> Result<TunedConfig, TuneError> {
        let mut tree = self.base.clone();
        for (p, v) in self.params.iter().zip(&c.0) {
            set_key(&mut tree, &p.key, v.clone());
        }
        TunedConfig::from_tree(tree)
    }
}

fn scalar_kind(v: &toml::Value) -> &'static str {
    match v {
        toml::Value::Float(_) => "a number",
        toml::Value::Integer(_) => "an integer",
        toml::Value::Boolean(_) => "true or false",
        toml::Value::String(_) => "a string",
        _ => "a table or array",
    }
}

/// A list value converted to the base value's type, if compatible.
fn coerce(v: &toml::Value, base: &toml::Value) -> Option<toml::Value> {
    use toml::Value as V;
    match (base, v) {
        (V::Float(_), V::Float(f)) => Some(V::Float(*f)),
        (V::Float(_), V::Integer(i)) => Some(V::Float(*i as f64)),
        (V::Integer(_), V::Integer(i)) => Some(V::Integer(*i)),
        (V::Integer(_), V::Float(f)) if f.fract() == 0.0 => Some(V::Integer(*f as i64)),
        (V::Boolean(_), V::Boolean(b)) => Some(V::Boolean(*b)),
        (V::String(_), V::String(s)) => Some(V::String(s.clone())),
        _ => None,
    }
}

fn collect_params(
    t: &toml::Table,
    prefix: &str,
    base: &toml::Table,
    known: &[String],
    out: &mut Vec<Param>,
) -> Result<(), String> {
    for (k, v) in t {
        let key = if prefix.is_empty() {
            k.clone()
        } else {
            format!("{prefix}.{k}")
        };
        let Some(spec) = v.as_table() else {
            return Err(format!(
                "params.{key}: expected {{ min = .., max = .. }} or {{ values = [..] }}, got {}",
                scalar_kind(v)
            ));
        };
        let is_leaf = spec.keys().any(|s| SPEC_KEYS.contains(&s.as_str()));
        if !is_leaf {
            // A table of keys (e.g. [params.delineate]); the key itself must exist.
            match get_key(base, &key) {
                Some(toml::Value::Table(_)) => {}
                _ => {
                    return Err(format!(
                        "params.{key}: unknown pipeline.toml key or table `{key}`{}",
                        hint(&key, known)
                    ))
                }
            }
            collect_params(spec, &key, base, known, out)?;
            continue;
        }
        let Some(b) = get_key(base, &key) else {
            return Err(format!(
                "params.{key}: unknown pipeline.toml key `{key}`{}",
                hint(&key, known)
            ));
        };
        if b.is_table() {
            return Err(format!(
                "params.{key}: `{key}` is a table, name one of its keys"
            ));
        }
        if key.starts_with("measure.") {
            return Err(format!(
                "params.{key}: [measure] keys do not change the scored beat marks; tune filter, detect or delineate keys"
            ));
        }
        for s in spec.keys() {
            if !SPEC_KEYS.contains(&s.as_str()) {
                let ks: Vec<String> = SPEC_KEYS.iter().map(|x| x.to_string()).collect();
                return Err(format!(
                    "params.{key}.{s}: unknown{}; allowed: min, max, scale, steps, values",
                    hint(s, &ks)
                ));
            }
        }
        let domain = if let Some(vals) = spec.get("values") {
            if spec.len() > 1 {
                return Err(format!(
                    "params.{key}: give either `values` or `min`/`max`, not both"
                ));
            }
            let Some(arr) = vals.as_array() else {
                return Err(format!(
                    "params.{key}.values: expected an array, got {}",
                    scalar_kind(vals)
                ));
            };
            if arr.is_empty() {
                return Err(format!("params.{key}.values: empty list"));
            }
            let mut list = Vec::new();
            for x in arr {
                let c = coerce(x, b).ok_or_else(|| {
                    format!(
                        "params.{key}.values: `{key}` takes {}, got {x}",
                        scalar_kind(b)
                    )
                })?;
                if !list.contains(&c) {
                    list.push(c);
                }
            }
            Domain::List(list)
        } else {
            let integer = match b {
                toml::Value::Integer(_) => true,
                toml::Value::Float(_) => false,
                other => {
                    return Err(format!(
                    "params.{key}: `{key}` takes {}, so give `values = [..]` instead of a range",
                    scalar_kind(other)
                ))
                }
            };
            let num = |name: &str| -> Result<f64, String> {
                match spec.get(name) {
                    Some(toml::Value::Float(f)) => Ok(*f),
                    Some(toml::Value::Integer(i)) => Ok(*i as f64),
                    Some(x) => Err(format!("params.{key}.{name}: expected a number, got {x}")),
                    None => Err(format!(
                        "params.{key}: `{name}` missing (a range needs min and max)"
                    )),
                }
            };
            let (min, max) = (num("min")?, num("max")?);
            if !(min.is_finite() && max.is_finite() && min < max) {
                return Err(format!(
                    "params.{key}: allowed min < max (finite), got min = {min}, max = {max}"
                ));
            }
            let log = match spec.get("scale").map(|s| s.as_str()) {
                None | Some(Some("linear")) => false,
                Some(Some("log")) => true,
                Some(_) => {
                    return Err(format!(
                        "params.{key}.scale: allowed \"linear\" or \"log\", got {}",
                        spec["scale"]
                    ))
                }
            };
            if log && min <= 0.0 {
                return Err(format!(
                    "params.{key}: a log scale needs min > 0, got {min}"
                ));
            }
            let steps = match spec.get("steps") {
                None => None,
                Some(toml::Value::Integer(i)) if *i >= 2 => Some(*i as usize),
                Some(x) => {
                    return Err(format!(
                        "params.{key}.steps: allowed an integer of 2 or more, got {x}"
                    ))
                }
            };
            Domain::Range {
                min,
                max,
                log,
                integer,
                steps,
            }
        };
        if out.iter().any(|p: &Param| p.key == key) {
            return Err(format!("params.{key}: given twice"));
        }
        out.push(Param {
            key,
            domain,
            base: b.clone(),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The stage defaults as a configuration tree (the CLI passes the full
    /// `pipeline.toml` tree, measure table included).
    fn base() -> toml::Table {
        let mut t = toml::Table::new();
        t.insert(
            "filter".into(),
            toml::Value::try_from(FilterConfig::default()).unwrap(),
        );
        t.insert(
            "detect".into(),
            toml::Value::try_from(DetectConfig::default()).unwrap(),
        );
        t.insert(
            "delineate".into(),
            toml::Value::try_from(DelineateConfig::default()).unwrap(),
        );
        t.insert(
            "measure".into(),
            toml::from_str::<toml::Value>("window_s = 10.0").unwrap(),
        );
        t
    }

    fn parse(text: &str) -> Result<SearchSpace, String> {
        SearchSpace::parse(text, "space.toml", &base()).map_err(|e| e.to_string())
    }

    #[test]
    fn nested_and_dotted_keys_parse_to_typed_domains() {
        let s = parse(
            "[params]\n\"delineate.t_xi_end\" = { min = 0.2, max = 0.7 }\n\
             [params.delineate]\nglobal_context_beats = { min = 2, max = 12 }\n\
             t_end_method = { values = ['wavelet', 'area'] }\n\
             [params.detect]\nrefractory_ms = { values = [180, 200.0] }\n",
        )
        .unwrap();
        let keys: Vec<&str> = s.params.iter().map(|p| p.key.as_str()).collect();
        assert_eq!(
            keys,
            [
                "delineate.global_context_beats",
                "delineate.t_end_method",
                "delineate.t_xi_end",
                "detect.refractory_ms"
            ]
        );
        assert!(matches!(
            s.params[0].domain,
            Domain::Range { integer: true, .. }
        ));
        // An integer written for a float key becomes a float.
        assert_eq!(
            s.params[3].domain,
            Domain::List(vec![toml::Value::Float(180.0), toml::Value::Float(200.0)])
        );
        assert_eq!(s.search, SearchOptions::default());
        let c = s.base_candidate();
        let cfg = s.config_for(&c).unwrap();
        assert_eq!(cfg.delineate, DelineateConfig::default());
    }

    #[test]
    fn unknown_key_is_named_with_the_closest_known_key() {
        let e = parse("[params.delineate]\nt_xi_ned = { min = 0.2, max = 0.7 }\n").unwrap_err();
        assert!(
            e.contains("space.toml")
                && e.contains("delineate.t_xi_ned")
                && e.contains("did you mean `delineate.t_xi_end`"),
            "{e}"
        );
        let e = parse("[params.delinate]\nt_xi_end = { min = 0.2, max = 0.7 }\n").unwrap_err();
        assert!(e.contains("delinate"), "{e}");
        let e = parse("[serch]\n[params.delineate]\nt_xi_end = { min = 0.2, max = 0.7 }\n")
            .unwrap_err();
        assert!(e.contains("did you mean `search`"), "{e}");
        let e = parse("[params.delineate]\nt_xi_end = { min = 0.2, maxx = 0.7 }\n").unwrap_err();
        assert!(
            e.contains("t_xi_end.maxx") && e.contains("did you mean `max`"),
            "{e}"
        );
        let e = parse(
            "[search]\nstratgy = 'grid'\n[params.delineate]\nt_xi_end = { values = [0.3] }\n",
        )
        .unwrap_err();
        assert!(e.contains("stratgy"), "{e}");
    }

    #[test]
    fn values_outside_a_stage_range_fail_with_the_stage_message() {
        // delineate.t_xi_end is allowed 0 to 1 (DelineateConfig::validate).
        let e = parse("[params.delineate]\nt_xi_end = { min = 0.2, max = 1.5 }\n").unwrap_err();
        assert!(
            e.contains("params.delineate.t_xi_end max = 1.5")
                && e.contains("invalid value for `delineate.t_xi_end`: allowed 0 to 1")
                && e.contains("got 1.5"),
            "{e}"
        );
        let e = parse("[params.delineate]\nt_end_method = { values = ['wavelet', 'slope'] }\n")
            .unwrap_err();
        assert!(e.contains("t_end_method") && e.contains("slope"), "{e}");
        let e = parse("[params.delineate]\nt_xi_end = { values = ['high'] }\n").unwrap_err();
        assert!(
            e.contains("takes a number") && e.contains("\"high\""),
            "{e}"
        );
    }

    #[test]
    fn other_mistakes_are_explained() {
        let cases = [
            ("[params.delineate]\nt_xi_end = 0.3\n", "expected { min"),
            (
                "[params.delineate]\nt_xi_end = { min = 0.7, max = 0.2 }\n",
                "min < max",
            ),
            (
                "[params.delineate]\nt_gamma = { min = 0.0, max = 0.5, scale = 'log' }\n",
                "log scale needs min > 0",
            ),
            (
                "[params.delineate]\nt_end_method = { min = 1, max = 2 }\n",
                "give `values",
            ),
            (
                "[params.delineate]\nt_xi_end = { values = [] }\n",
                "empty list",
            ),
            ("[params]\ndelineate = { min = 1, max = 2 }\n", "is a table"),
            (
                "[params.measure]\nwindow_s = { min = 5, max = 10 }\n",
                "[measure] keys do not change",
            ),
            (
                "[search]\nfolds = 1\n[params.delineate]\nt_xi_end = { values = [0.3] }\n",
                "folds: allowed 2 or more, got 1",
            ),
            ("[search]\n", "no [params] table"),
        ];
        for (text, want) in cases {
            let e = parse(text).unwrap_err();
            assert!(e.contains(want), "{text}: {e}");
        }
    }

    #[test]
    fn cross_key_violation_makes_only_that_candidate_invalid() {
        // t_window_end_min_ms must not exceed t_window_end_max_ms (600 by default).
        let s = parse("[params.delineate]\nt_window_end_min_ms = { min = 300, max = 700 }\n")
            .unwrap_err();
        // The range end 700 alone already breaks the rule against the base: caught early.
        assert!(s.contains("t_window_end_min_ms"), "{s}");
        let s = parse(
            "[params.delineate]\nt_window_end_min_ms = { min = 300, max = 500 }\nt_window_end_max_ms = { min = 400, max = 800 }\n",
        )
        .unwrap();
        let i_min = s
            .params
            .iter()
            .position(|p| p.key.ends_with("min_ms"))
            .unwrap();
        let mut c = s.base_candidate();
        c.0[i_min] = toml::Value::Float(500.0);
        c.0[1 - i_min] = toml::Value::Float(400.0);
        let e = s.config_for(&c).unwrap_err().to_string();
        assert!(
            e.contains("delineate.t_window_end_min_ms")
                && e.contains("at most t_window_end_max_ms"),
            "{e}"
        );
    }

    #[test]
    fn grids_include_ends_and_round_integers() {
        assert_eq!(
            range_grid(0.0, 1.0, false, false, 5),
            [0.0, 0.25, 0.5, 0.75, 1.0].map(toml::Value::Float).to_vec()
        );
        assert_eq!(
            range_grid(1.0, 100.0, true, false, 3),
            [1.0, 10.0, 100.0].map(toml::Value::Float).to_vec()
        );
        assert_eq!(
            range_grid(1.0, 3.0, false, true, 5),
            [1, 2, 3].map(toml::Value::Integer).to_vec()
        );
        assert_eq!(round_sig(0.123456, 4), 0.1235);
        assert_eq!(round_sig(1234.5, 2), 1200.0);
    }
}
