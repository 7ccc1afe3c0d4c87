//! What every JSON document and summary says about itself, and the loop-health summary's output
//! formats: the schema and product versions, the hash of the settings the output was made with
//! ([`settings_hash`]), and the one list of format names used by the command line, the
//! configuration's `[report] formats`, the scheduler and the file names. Depends only on the
//! analysis core's [`LoopSetup`], so any layer can use it.

use crate::analysis::LoopSetup;

/// The version of the JSON documents people's programs read (`analyze --json`, the summary's
/// JSON): raised when a field changes meaning or goes away, not when one is added.
pub const SCHEMA_VERSION: u32 = 3;

/// The product's version, carried by every JSON document beside [`SCHEMA_VERSION`].
pub const PRODUCT_VERSION: &str = env!("CARGO_PKG_VERSION");

/// The hash of the analysis settings an output was made with, so a reviewer can tell whether two
/// outputs were made with the same settings: `sha256:` and 64 hex digits.
///
/// Hashed is a canonical text of the loops' [`LoopSetup`]s (tag, OP range, spec, analysis
/// options, and whatever the setup gains later): a JSON array sorted by tag, each object's keys
/// sorted, no white space, numbers as `serde_json` writes them (the shortest text that reads
/// back to the same `f64`). The order the setups come in does not matter; any changed setting
/// changes the hash. SHA-256 is the hash of FIPS 180-4. One loop's hash is what `analyze --json`
/// for that loop carries; a summary carries the hash of all its loops and each loop's own.
pub fn settings_hash<'a>(setups: impl IntoIterator<Item = &'a LoopSetup>) -> String {
    format!(
        "sha256:{}",
        sha256_hex(canonical_settings(setups).as_bytes())
    )
}

/// The canonical text [`settings_hash`] hashes.
pub fn canonical_settings<'a>(setups: impl IntoIterator<Item = &'a LoopSetup>) -> String {
    let mut list: Vec<&LoopSetup> = setups.into_iter().collect();
    list.sort_by(|a, b| a.tag.cmp(&b.tag));
    let value = serde_json::to_value(&list).unwrap_or(serde_json::Value::Null);
    let mut out = String::new();
    write_canonical(&value, &mut out);
    out
}

/// Writes `v` as compact JSON with every object's keys in sorted order, whatever order the
/// JSON library keeps them in.
fn write_canonical(v: &serde_json::Value, out: &mut String) {
    use serde_json::Value;
    match v {
        Value::Array(items) => {
            out.push('[');
            for (i, item) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write_canonical(item, out);
            }
            out.push(']');
        }
        Value::Object(map) => {
            let mut keys: Vec<&String> = map.keys().collect();
            keys.sort();
            out.push('{');
            for (i, k) in keys.into_iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                out.push_str(&Value::String(k.clone()).to_string());
                out.push(':');
                write_canonical(&map[k], out);
            }
            out.push('}');
        }
        scalar => out.push_str(&scalar.to_string()),
    }
}

fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::Digest;
    sha2::Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// A summary format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Format {
    Html,
    Markdown,
    Json,
}

impl Format {
    pub const ALL: [Format; 3] = [Format::Html, Format::Markdown, Format::Json];

    /// The name used on the command line, in the config and as the file extension.
    pub fn as_str(self) -> &'static str {
        match self {
            Format::Html => "html",
            Format::Markdown => "md",
            Format::Json => "json",
        }
    }

    /// The format of a name as [`Format::as_str`] spells it; `None` for any other text.
    pub fn parse(s: &str) -> Option<Format> {
        Format::ALL.into_iter().find(|f| f.as_str() == s)
    }
}

impl std::fmt::Display for Format {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_format_parses_from_its_own_name_only() {
        for f in Format::ALL {
            assert_eq!(Format::parse(f.as_str()), Some(f));
        }
        assert_eq!(Format::parse("markdown"), None);
    }

    #[test]
    fn sha256_matches_the_published_example() {
        // FIPS 180-4's example (NIST CSRC "SHA256.pdf"): SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    fn setup(tag: &str, within_s: f64) -> LoopSetup {
        LoopSetup::new(tag, crate::analysis::Spec::within(within_s))
    }

    #[test]
    fn the_settings_hash_follows_every_setting_and_ignores_order() {
        let (a, b) = (setup("TIC-1", 600.0), setup("FIC-2", 60.0));
        let h = settings_hash([&a, &b]);
        assert!(h.starts_with("sha256:") && h.len() == 7 + 64, "{h}");
        assert_eq!(h, settings_hash([&b, &a]), "order of the loops");
        assert_eq!(h, settings_hash(vec![&a.clone(), &b.clone()]));
        // A changed spec, OP limit, option or tag gives another hash.
        let mut spec = a.clone();
        spec.spec.settle_within_s = 601.0;
        let mut op = a.clone();
        op.op.max = 90.0;
        let mut opt = a.clone();
        opt.options.identify.min_r2 = 0.7;
        let renamed = setup("TIC-9", 600.0);
        for other in [&spec, &op, &opt, &renamed] {
            assert_ne!(settings_hash([other, &b]), h, "{other:?}");
        }
        assert_ne!(settings_hash([&a]), h, "a loop left out");
    }

    #[test]
    fn the_settings_hash_is_the_sha256_of_the_canonical_text_as_coreutils_computes_it() {
        // Stable across runs and machines: the hash is a function of the canonical text alone,
        // checked here against GNU coreutils' `sha256sum` (skipped where it is not installed).
        let (a, b) = (setup("TIC-1", 600.0), setup("FIC-2", 60.0));
        let text = canonical_settings([&a, &b]);
        let Ok(mut child) = std::process::Command::new("sha256sum")
            .stdin(std::process::Stdio::piped())
            .stdout(std::process::Stdio::piped())
            .spawn()
        else {
            return;
        };
        use std::io::Write;
        child
            .stdin
            .take()
            .unwrap()
            .write_all(text.as_bytes())
            .unwrap();
        let out = String::from_utf8(child.wait_with_output().unwrap().stdout).unwrap();
        let hex = out.split_whitespace().next().unwrap();
        assert_eq!(settings_hash([&a, &b]), format!("sha256:{hex}"));
    }

    #[test]
    fn the_canonical_text_sorts_keys_and_loops() {
        let text = canonical_settings([&setup("B", 60.0), &setup("A", 60.0)]);
        assert!(
            text.starts_with("[{\"actuator\":null,\"controller\":null,\"op\":{\"max\":100.0,"),
            "{text}"
        );
        assert!(
            text.find("\"tag\":\"A\"") < text.find("\"tag\":\"B\""),
            "{text}"
        );
        assert!(!text.contains(' '), "{text}");
    }
}
