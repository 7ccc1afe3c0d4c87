//! The summary's three formats: one self-contained HTML file (inline CSS and SVG, no scripts,
//! nothing fetched), Markdown for notes and tickets, and JSON with the same numbers for other
//! tools. HTML and Markdown come from minijinja templates in `templates/`; numbers are formatted
//! by the few filters registered here, so both formats write them alike.

use super::build::WeeklyReport;
use crate::analysis::Verdict;
pub use crate::summary_format::Format;
use crate::units::{fraction_to_pct, human_duration, quantity, signed_quantity};
use minijinja::value::{Serde, Value};
use minijinja::{Environment, context};
use std::collections::BTreeMap;

/// A summary that could not be rendered: a bug in this version, not in the data.
#[derive(Debug, thiserror::Error)]
pub enum RenderError {
    #[error("cannot render the json summary: {0}")]
    Json(#[from] serde_json::Error),
    #[error("cannot render the {format} summary: {source:#}")]
    Template {
        format: &'static str,
        source: minijinja::Error,
    },
}

/// Renders the summary in one format.
pub fn render(report: &WeeklyReport, format: Format) -> Result<String, RenderError> {
    if format == Format::Json {
        let mut s = serde_json::to_string_pretty(report)?;
        s.push('\n');
        return Ok(s);
    }
    let template = |source| RenderError::Template {
        format: format.as_str(),
        source,
    };
    let html = format == Format::Html;
    let env = environment(html).map_err(template)?;
    let name = if html { "report.html" } else { "report.md" };
    let svgs: BTreeMap<&str, Value> = report
        .loops
        .iter()
        .map(|l| {
            let safe = |s: &Option<String>| s.clone().map(Value::from_safe_string);
            let v = context! {
                episode => safe(&l.episode_svg),
                trend => safe(&l.trend_svg),
                disturbance => safe(&l.disturbance_svg),
            };
            (l.tag.as_str(), v)
        })
        .collect();
    env.get_template(name)
        .and_then(|t| {
            t.render(context! {
                r => Serde(report),
                svgs => svgs,
                css => Value::from_safe_string(CSS.to_string()),
                verdicts => verdict_rows(),
            })
        })
        .map_err(template)
}

/// How the summary shows each verdict, in [`Verdict::ALL`]'s order: its key in the counts
/// (the JSON name), its label, and the CSS class of its part of the bar of verdict shares (told
/// apart by shade and pattern, and named in the table beside it).
fn verdict_rows() -> Vec<Value> {
    Verdict::ALL
        .iter()
        .map(|v| {
            let mix = match v {
                Verdict::Met => "met",
                Verdict::TuningLimited => "tuning",
                Verdict::ActuatorLimited => "actuator",
                Verdict::Unreachable => "unreach",
                Verdict::Inconclusive => "neutral",
            };
            context! { key => v.as_str(), label => v.label(), mix }
        })
        .collect()
}

const CSS: &str = include_str!("templates/report.css");

/// The templates and filters. HTML drops the newline after each block tag (tidier output);
/// Markdown keeps them, because there a newline decides where a table or a paragraph ends.
fn environment(trim_blocks: bool) -> Result<Environment<'static>, minijinja::Error> {
    let mut env = Environment::new();
    env.set_syntax(
        minijinja::syntax::SyntaxConfig::builder()
            .trim_blocks(trim_blocks)
            .keep_trailing_newline(true)
            .build()?,
    );
    env.add_template("report.html", include_str!("templates/report.html"))?;
    env.add_template("report.md", include_str!("templates/report.md"))?;
    // Numbers for people come from `units` only: durations in s, min or h as fits, quantities
    // to significant figures with their unit; a missing number reads as a dash.
    env.add_filter("dur", |v: Option<f64>| -> String {
        v.map_or("—".into(), human_duration)
    });
    env.add_filter("qty", |v: Option<f64>, unit: Option<String>| -> String {
        v.map_or("—".into(), |x| quantity(x, unit.as_deref().unwrap_or("")))
    });
    env.add_filter(
        "signed_qty",
        |v: Option<f64>, unit: Option<String>| -> String {
            v.map_or("—".into(), |x| {
                signed_quantity(x, unit.as_deref().unwrap_or(""))
            })
        },
    );
    env.add_filter("share", |v: Option<f64>| -> String {
        v.map_or("—".into(), |s| quantity(fraction_to_pct(s), "%"))
    });
    Ok(env)
}
