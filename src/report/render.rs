//! The summary's three formats: one self-contained HTML file (inline CSS and SVG, no scripts,
//! nothing fetched), Markdown for notes and tickets, and JSON with the same numbers for other
//! tools. HTML and Markdown come from minijinja templates in `templates/`; numbers are formatted
//! by the few filters registered here, so both formats write them alike.

use super::build::WeeklyReport;
use minijinja::value::{Serde, Value};
use minijinja::{Environment, context};
use std::collections::BTreeMap;

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

    pub fn parse(s: &str) -> Option<Format> {
        Format::ALL.into_iter().find(|f| f.as_str() == s)
    }
}

/// The inline SVGs of one loop (HTML only).
#[derive(Debug, Clone, Default, serde::Serialize)]
pub struct LoopSvgs {
    pub episode: Option<String>,
    pub trend: Option<String>,
}

/// Renders the summary in one format.
pub fn render(report: &WeeklyReport, format: Format) -> Result<String, String> {
    match format {
        Format::Json => serde_json::to_string_pretty(report)
            .map(|mut s| {
                s.push('\n');
                s
            })
            .map_err(|e| e.to_string()),
        Format::Html | Format::Markdown => {
            let env = environment(format == Format::Html)?;
            let name = if format == Format::Html {
                "report.html"
            } else {
                "report.md"
            };
            let svgs: BTreeMap<&str, Value> = report
                .loops
                .iter()
                .map(|l| {
                    let safe = |s: &Option<String>| s.clone().map(Value::from_safe_string);
                    let v = context! {
                        episode => safe(&l.episode_svg),
                        trend => safe(&l.trend_svg),
                    };
                    (l.tag.as_str(), v)
                })
                .collect();
            let tmpl = env.get_template(name).map_err(|e| format!("{e:#}"))?;
            tmpl.render(context! {
                r => Serde(report),
                svgs => svgs,
                css => Value::from_safe_string(CSS.to_string()),
            })
            .map_err(|e| format!("{e:#}"))
        }
    }
}

const CSS: &str = include_str!("templates/report.css");

/// The templates and filters. HTML drops the newline after each block tag (tidier output);
/// Markdown keeps them, because there a newline decides where a table or a paragraph ends.
fn environment(trim_blocks: bool) -> Result<Environment<'static>, String> {
    let mut env = Environment::new();
    env.set_syntax(
        minijinja::syntax::SyntaxConfig::builder()
            .trim_blocks(trim_blocks)
            .keep_trailing_newline(true)
            .build()
            .map_err(|e| format!("{e:#}"))?,
    );
    env.add_template("report.html", include_str!("templates/report.html"))
        .map_err(|e| format!("{e:#}"))?;
    env.add_template("report.md", include_str!("templates/report.md"))
        .map_err(|e| format!("{e:#}"))?;
    env.add_filter("secs", |v: Option<f64>| -> String {
        v.map_or("—".into(), |s| format!("{s:.0} s"))
    });
    env.add_filter("share", |v: Option<f64>| -> String {
        v.map_or("—".into(), |s| format!("{:.0} %", 100.0 * s))
    });
    env.add_filter("pct1", |v: Option<f64>| -> String {
        v.map_or("—".into(), |s| format!("{s:.1} %"))
    });
    env.add_filter("signed_pct", |v: f64| -> String { format!("{v:+.1} %") });
    env.add_filter("num", |v: Option<f64>, digits: Option<usize>| -> String {
        v.map_or("—".into(), |x| format!("{x:.*}", digits.unwrap_or(2)))
    });
    Ok(env)
}
