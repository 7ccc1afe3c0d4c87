//! What goes wrong with a config file, and where: [`ConfigError`] for the caller, [`Problem`] for
//! each validation problem, and the [`Checker`] that collects problems while the raw file is
//! turned into checked settings, locating each one at its key's line and column.

use crate::analysis;
use std::fmt::{Display, Write as _};
use std::ops::RangeInclusive;
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
    /// TOML syntax, a wrong type, a missing required key or an unknown key.
    #[error("{path}:{line}:{column}: {message}")]
    Invalid {
        path: PathBuf,
        line: usize,
        column: usize,
        message: String,
    },
    /// Everything validation found wrong, one problem per line.
    #[error("{}", problem_lines(path, problems))]
    Problems {
        path: PathBuf,
        problems: Vec<Problem>,
    },
    #[error("{path}: loop {tag}: {problem}")]
    Loop {
        path: PathBuf,
        tag: String,
        #[source]
        problem: analysis::Problem,
    },
    #[error("{path}: no loop tagged {tag} (loops in this file: {known})")]
    UnknownLoop {
        path: PathBuf,
        tag: String,
        known: String,
    },
    /// The MQTT password could not be read from where the config says it is.
    #[error("MQTT password from {origin}: {message}")]
    Password { origin: String, message: String },
}

/// One validation problem: the dotted key it concerns, where that is in the file, and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// The key, written as in TOML, e.g. `loops.TIC-101.sp.topic`.
    pub key: String,
    /// 1-based line and column of the key (or of its value), or of the nearest enclosing table
    /// that is in the file; `None` only when not even that is.
    pub position: Option<(usize, usize)>,
    pub message: String,
}

fn problem_lines(path: &Path, problems: &[Problem]) -> String {
    let mut out = String::new();
    for (i, p) in problems.iter().enumerate() {
        if i > 0 {
            out.push('\n');
        }
        let _ = match p.position {
            Some((line, column)) => write!(
                out,
                "{}:{line}:{column}: {}: {}",
                path.display(),
                p.key,
                p.message
            ),
            None => write!(out, "{}: {}: {}", path.display(), p.key, p.message),
        };
    }
    out
}

/// A TOML syntax or type error (or an unknown key), located in `text`.
pub(super) fn invalid(text: &str, path: &Path, e: &toml::de::Error) -> ConfigError {
    let (line, column) = e.span().map(|s| line_col(text, s.start)).unwrap_or((0, 0));
    ConfigError::Invalid {
        path: path.to_owned(),
        line,
        column,
        message: e.message().to_string(),
    }
}

/// Collects problems while turning the raw file into checked settings. Each concern's checks
/// are an `impl Checker` block in that concern's file.
pub(super) struct Checker<'a> {
    text: &'a str,
    doc: Option<toml::Spanned<toml::de::DeTable<'a>>>,
    /// The config file's folder, for relative paths.
    pub(super) dir: &'a Path,
    problems: Vec<Problem>,
}

impl<'a> Checker<'a> {
    pub(super) fn new(text: &'a str, path: &'a Path) -> Checker<'a> {
        Checker {
            text,
            // It parsed once, so it parses again; `ok()` only spares an unreachable panic.
            doc: toml::de::DeTable::parse(text).ok(),
            dir: path.parent().unwrap_or(Path::new("")),
            problems: Vec::new(),
        }
    }

    /// `Ok(value)` when nothing was found wrong, else every problem in file order (problems
    /// without a position last; the sort is stable, so problems at one place keep the order
    /// they were found in).
    pub(super) fn finish<T>(self, value: T, path: &Path) -> Result<T, ConfigError> {
        if self.problems.is_empty() {
            return Ok(value);
        }
        let mut problems = self.problems;
        problems.sort_by_key(|p| p.position.map_or((usize::MAX, 0), |p| p));
        Err(ConfigError::Problems {
            path: path.to_owned(),
            problems,
        })
    }

    pub(super) fn problem(&mut self, keys: &[&str], message: impl Into<String>) {
        self.problems.push(Problem {
            key: key_path(keys),
            position: self.position(keys),
            message: message.into(),
        });
    }

    /// Whether `value` lies in `range` (a NaN never does); if not, a problem at `keys` saying
    /// `requirement (got value)`. The one range check of every number the config checks itself.
    pub(super) fn within<T: PartialOrd + Display>(
        &mut self,
        keys: &[&str],
        value: T,
        range: RangeInclusive<T>,
        requirement: impl Display,
    ) -> bool {
        let ok = range.contains(&value);
        if !ok {
            self.problem(keys, format!("{requirement} (got {value})"));
        }
        ok
    }

    /// The line and column of a key, or of the nearest enclosing table present in the file. For
    /// a key holding a plain value, that is the value; for a table, the key itself.
    fn position(&self, keys: &[&str]) -> Option<(usize, usize)> {
        let mut table = self.doc.as_ref()?.get_ref();
        let mut found = None;
        for (i, k) in keys.iter().enumerate() {
            let Some((key, value)) = table.get_key_value(*k) else {
                break;
            };
            let value_ref = value.get_ref();
            let span = if i + 1 == keys.len() && !value_ref.is_table() {
                value.span()
            } else {
                key.span()
            };
            found = Some(line_col(self.text, span.start));
            match value_ref.as_table() {
                Some(t) => table = t,
                None => break,
            }
        }
        found
    }
}

/// Dotted TOML key, quoting the parts that are not bare keys.
pub(super) fn key_path(keys: &[&str]) -> String {
    let bare = |k: &str| {
        !k.is_empty()
            && k.chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
    };
    keys.iter()
        .map(|k| {
            if bare(k) {
                (*k).to_owned()
            } else {
                format!("{k:?}")
            }
        })
        .collect::<Vec<_>>()
        .join(".")
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

    #[test]
    fn keys_that_are_not_bare_are_quoted() {
        assert_eq!(key_path(&["loops", "TIC-101", "sp"]), "loops.TIC-101.sp");
        assert_eq!(key_path(&["loops", "TIC 101"]), "loops.\"TIC 101\"");
    }

    #[test]
    fn lines_and_columns_count_from_one() {
        assert_eq!(line_col("a\nbc\n", 0), (1, 1));
        assert_eq!(line_col("a\nbc\n", 3), (2, 2));
        assert_eq!(line_col("a", 99), (1, 2));
    }
}
