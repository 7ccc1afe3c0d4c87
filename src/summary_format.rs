//! The loop-health summary's output formats: the one list of their names, used by the command
//! line, the configuration's `[report] formats`, the scheduler and the file names. Depends on
//! nothing else in the crate, so any layer can name a format.

/// The version of the JSON documents people's programs read (`analyze --json`, the summary's
/// JSON): raised when a field changes meaning or goes away, not when one is added.
pub const SCHEMA_VERSION: u32 = 2;

/// The product's version, carried by every JSON document beside [`SCHEMA_VERSION`].
pub const PRODUCT_VERSION: &str = env!("CARGO_PKG_VERSION");

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
}
