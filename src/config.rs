//! The TOML configuration: which loops to watch, their actuator ranges and their specs.
//!
//! Loops are keyed by tag (ISA-5.1 style such as `TIC-101` is the trade's convention). Unknown
//! keys are errors, so a typo never silently falls back to a default; every error names the file,
//! the line and the key.

use crate::analysis::{AnalysisOptions, LoopSetup, OpRange, Spec};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A problem with a configuration file, located as precisely as the file allows.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ConfigError {
    #[error("cannot read config file {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}:{line}:{column}: {message}")]
    Invalid {
        path: PathBuf,
        line: usize,
        column: usize,
        message: String,
    },
    #[error("{path}: loop {tag}: {message}")]
    Loop {
        path: PathBuf,
        tag: String,
        message: String,
    },
    #[error("{path}: no loop tagged {tag} (loops in this file: {known})")]
    UnknownLoop {
        path: PathBuf,
        tag: String,
        known: String,
    },
}

/// The whole file.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Config {
    #[serde(default)]
    pub loops: BTreeMap<String, LoopConfig>,
}

/// One loop.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoopConfig {
    /// Free text for people: what the loop controls and with what.
    #[serde(default)]
    pub description: String,
    /// Engineering unit of the PV, for display (e.g. "°C").
    #[serde(default)]
    pub pv_unit: String,
    /// Engineering unit of the OP, for display (usually "%").
    #[serde(default = "default_op_unit")]
    pub op_unit: String,
    pub op_min: f64,
    pub op_max: f64,
    pub spec: SpecConfig,
    #[serde(default)]
    pub analysis: AnalysisConfig,
}

fn default_op_unit() -> String {
    "%".into()
}

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SpecConfig {
    #[serde(default = "default_band")]
    pub settle_band_pct: f64,
    pub settle_within_s: f64,
    pub max_overshoot_pct: Option<f64>,
}

fn default_band() -> f64 {
    2.0
}

/// Optional analysis settings per loop; anything left out is derived from the data.
#[derive(Debug, Clone, Copy, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AnalysisConfig {
    pub sp_deadband: Option<f64>,
    pub sp_hold_s: Option<f64>,
    pub max_gap_s: Option<f64>,
    pub upgrade_ratio_limit: Option<f64>,
}

impl Config {
    /// Reads and validates a config file.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_owned(),
            source,
        })?;
        Config::parse(&text, path)
    }

    /// Parses and validates config text; `path` is only used in messages.
    pub fn parse(text: &str, path: &Path) -> Result<Config, ConfigError> {
        let cfg: Config = toml::from_str(text).map_err(|e| {
            let (line, column) = e.span().map(|s| line_col(text, s.start)).unwrap_or((0, 0));
            ConfigError::Invalid {
                path: path.to_owned(),
                line,
                column,
                message: e.message().to_string(),
            }
        })?;
        for (tag, l) in &cfg.loops {
            let fail = |message: String| ConfigError::Loop {
                path: path.to_owned(),
                tag: tag.clone(),
                message,
            };
            if !(l.op_min.is_finite() && l.op_max.is_finite() && l.op_min < l.op_max) {
                return Err(fail(format!(
                    "op_min ({}) must be below op_max ({})",
                    l.op_min, l.op_max
                )));
            }
            l.setup(tag).map_err(fail)?;
        }
        Ok(cfg)
    }

    /// The analysis setup of one loop, or an error listing the loops that exist.
    pub fn loop_setup(&self, tag: &str, path: &Path) -> Result<LoopSetup, ConfigError> {
        let l = self
            .loops
            .get(tag)
            .ok_or_else(|| ConfigError::UnknownLoop {
                path: path.to_owned(),
                tag: tag.to_owned(),
                known: self.loops.keys().cloned().collect::<Vec<_>>().join(", "),
            })?;
        l.setup(tag).map_err(|message| ConfigError::Loop {
            path: path.to_owned(),
            tag: tag.to_owned(),
            message,
        })
    }
}

impl LoopConfig {
    /// Turns the loop's section into an analysis setup, checking the spec's values.
    pub fn setup(&self, tag: &str) -> Result<LoopSetup, String> {
        let spec = Spec {
            settle_band_pct: self.spec.settle_band_pct,
            settle_within_s: self.spec.settle_within_s,
            max_overshoot_pct: self.spec.max_overshoot_pct,
        };
        validate_spec(&spec)?;
        let mut options = AnalysisOptions {
            sp_deadband: self.analysis.sp_deadband,
            sp_hold_s: self.analysis.sp_hold_s,
            max_gap_s: self.analysis.max_gap_s,
            ..AnalysisOptions::default()
        };
        if let Some(r) = self.analysis.upgrade_ratio_limit {
            options.upgrade_ratio_limit = r;
        }
        Ok(LoopSetup {
            tag: tag.to_owned(),
            op: OpRange {
                min: self.op_min,
                max: self.op_max,
            },
            spec,
            options,
        })
    }
}

/// Checks a spec's numbers; the message names the offending key.
pub fn validate_spec(spec: &Spec) -> Result<(), String> {
    if !(spec.settle_band_pct > 0.0 && spec.settle_band_pct < 100.0) {
        return Err(format!(
            "settle_band_pct must be between 0 and 100 (got {})",
            spec.settle_band_pct
        ));
    }
    if !(spec.settle_within_s.is_finite() && spec.settle_within_s > 0.0) {
        return Err(format!(
            "settle_within_s must be a positive number of seconds (got {})",
            spec.settle_within_s
        ));
    }
    if let Some(o) = spec.max_overshoot_pct
        && !(o.is_finite() && o >= 0.0)
    {
        return Err(format!("max_overshoot_pct must be 0 or more (got {o})"));
    }
    Ok(())
}

/// 1-based line and column of a byte offset.
fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let before = &text[..offset.min(text.len())];
    let line = before.matches('\n').count() + 1;
    let column = before
        .rfind('\n')
        .map_or(before.len(), |p| before.len() - p - 1)
        + 1;
    (line, column)
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
[loops.TIC-101]
description = "Reactor jacket temperature"
op_min = 0.0
op_max = 100.0
[loops.TIC-101.spec]
settle_within_s = 900
max_overshoot_pct = 10
"#;

    #[test]
    fn a_valid_loop_becomes_an_analysis_setup() {
        let cfg = Config::parse(GOOD, Path::new("x.toml")).unwrap();
        let s = cfg.loop_setup("TIC-101", Path::new("x.toml")).unwrap();
        assert_eq!(s.spec.settle_band_pct, 2.0);
        assert_eq!(s.spec.settle_within_s, 900.0);
        assert_eq!(s.op.max, 100.0);
    }

    #[test]
    fn a_misspelt_key_is_an_error_naming_file_line_and_key() {
        let bad = GOOD.replace("max_overshoot_pct", "max_overshot_pct");
        let err = Config::parse(&bad, Path::new("plant.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.starts_with("plant.toml:8:"), "{err}");
        assert!(err.contains("max_overshot_pct"), "{err}");
    }

    #[test]
    fn an_inverted_op_range_is_refused_with_the_loop_tag() {
        let bad = GOOD.replace("op_max = 100.0", "op_max = -5.0");
        let err = Config::parse(&bad, Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("TIC-101") && err.contains("op_min"), "{err}");
    }

    #[test]
    fn an_unknown_loop_lists_the_known_ones() {
        let cfg = Config::parse(GOOD, Path::new("p.toml")).unwrap();
        let err = cfg
            .loop_setup("FIC-9", Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("FIC-9") && err.contains("TIC-101"), "{err}");
    }

    #[test]
    fn a_spec_time_of_zero_is_refused() {
        let bad = GOOD.replace("settle_within_s = 900", "settle_within_s = 0");
        let err = Config::parse(&bad, Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("settle_within_s"), "{err}");
    }
}
