//! Output formats for people (a plain-text table) and for programs (JSON). Only this module
//! and the reports know how results look; the analysis core returns values.

use crate::analysis::LoopSetup;
use crate::analysis::assess::{LoopReport, Verdict};
use crate::analysis::regulation;
use crate::csvload::LoadReport;
use crate::units::{fraction_to_pct, human_duration, quantity};
use std::io::Write;

/// JSON: the loop report with the field names the design fixes, plus how the file was read and
/// the hash of the settings the analysis used. When the file's time was RFC 3339, each episode
/// also gets `start_time` (RFC 3339, UTC).
pub fn json(
    report: &LoopReport,
    setup: &LoopSetup,
    load: &LoadReport,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    let mut v = serde_json::to_value(report)?;
    if let Some(origin) = load.time_origin
        && let Some(eps) = v.get_mut("episodes").and_then(|e| e.as_array_mut())
    {
        for (e, r) in eps.iter_mut().zip(&report.episodes) {
            let at = absolute(origin, r.start_s);
            e["start_time"] = serde_json::Value::String(at);
        }
    }
    v["input"] = serde_json::to_value(load)?;
    v["schema_version"] = crate::summary_format::SCHEMA_VERSION.into();
    v["version"] = crate::summary_format::PRODUCT_VERSION.into();
    v["settings_hash"] = crate::summary_format::settings_hash([setup]).into();
    serde_json::to_writer_pretty(&mut *out, &v)?;
    writeln!(out)?;
    Ok(())
}

fn absolute(origin: jiff::Timestamp, offset_s: f64) -> String {
    let span = jiff::SignedDuration::from_secs_f64(offset_s);
    origin
        .checked_add(span)
        .map_or_else(|_| format!("{offset_s} s"), |t| t.to_string())
}

fn opt_s(v: Option<f64>) -> String {
    v.map_or("—".into(), human_duration)
}

/// Text: a header with the spec and the data, one row per episode, then model, tally,
/// recommendation and the caution. Paragraphs wrap at the terminal's width (80 columns when
/// the output is not a terminal).
pub fn text(report: &LoopReport, load: &LoadReport, out: &mut dyn Write) -> anyhow::Result<()> {
    let width = textwrap::termwidth();
    header(report, load, width, out)?;
    writeln!(out)?;
    if report.episodes.is_empty() {
        writeln!(out, "No setpoint changes found in the data.")?;
    } else {
        episode_table(report, load, width, out)?;
    }
    writeln!(out)?;
    match (&report.model, &report.model_refusal) {
        (Some(m), _) => para(
            out,
            width,
            "",
            &format!(
                "Process model ({}): {}; explains {:.2} % of PV variation ({} changes)",
                m.kind().label(),
                m.describe(&report.units),
                fraction_to_pct(m.fit_r2),
                m.episodes_used
            ),
        )?,
        (None, Some(why)) => para(out, width, "", &format!("Process model: none — {why}"))?,
        (None, None) => writeln!(out, "Process model: none")?,
    }
    writeln!(out, "Verdicts: {}", report.counts.tally())?;
    let r = &report.recommendation;
    writeln!(out)?;
    writeln!(out, "Recommendation: {}", r.action.label())?;
    para(out, width, "  ", &r.summary)?;
    for line in crate::analysis::advice::settings_lines(r, &report.units) {
        para(out, width, "  ", &line)?;
    }
    for c in &r.cautions {
        para(out, width, "  ", &format!("Check: {c}"))?;
    }
    para(out, width, "  ", r.caution)?;
    writeln!(out)?;
    writeln!(
        out,
        "Between setpoint changes ({}):",
        report.spec.hold_words(&report.units.pv)
    )?;
    let dead_time_s = report.model.as_ref().map(|m| m.dead_time_s);
    for line in regulation::words::lines(&report.regulation, &report.units, dead_time_s) {
        para(out, width, "  ", &line)?;
    }
    Ok(())
}

/// A paragraph wrapped at `width`, each line indented by `indent`.
fn para(out: &mut dyn Write, width: usize, indent: &str, text: &str) -> anyhow::Result<()> {
    Ok(paragraph(out, width.max(40), indent, indent, text)?)
}

/// `text` wrapped at `width` columns (`textwrap`), its first line after `first` and every other
/// line after `rest`; the one way the product's text output wraps.
pub fn paragraph(
    out: &mut dyn Write,
    width: usize,
    first: &str,
    rest: &str,
    text: &str,
) -> std::io::Result<()> {
    let options = textwrap::Options::new(width)
        .initial_indent(first)
        .subsequent_indent(rest);
    for line in textwrap::wrap(text, options) {
        writeln!(out, "{}", line.trim_end())?;
    }
    Ok(())
}

/// The spec, the data and how the file was read, and the changes that were not scored.
fn header(
    report: &LoopReport,
    load: &LoadReport,
    width: usize,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    let (spec, u) = (&report.spec, &report.units);
    let overshoot = spec.max_overshoot_pct.map_or(String::new(), |o| {
        format!(", overshoot at most {}", quantity(o, "%"))
    });
    para(
        out,
        width,
        "",
        &format!(
            "Loop {}   spec: within {} in {}{}   OP range {} to {}",
            report.tag,
            spec.band_words(&u.pv),
            human_duration(spec.settle_within_s),
            overshoot,
            quantity(report.op_range.min, &u.op),
            quantity(report.op_range.max, &u.op)
        ),
    )?;
    let d = &report.data;
    para(
        out,
        width,
        "",
        &format!(
            "Data: {} samples over {}, every {} (median); PV noise σ ≈ {}; {}",
            d.samples,
            human_duration(d.duration_s),
            human_duration(d.median_sample_s),
            quantity(d.pv_noise_sd, &u.pv),
            crate::units::count(d.gaps, "data gap", "data gaps")
        ),
    )?;
    for note in load.notes() {
        para(out, width, "  ", &format!("input: {note}"))?;
    }
    for f in &d.quality.findings {
        para(
            out,
            width,
            "  ",
            &format!("data quality: {}", f.describe(&u.pv)),
        )?;
    }
    let skipped = [
        (d.changes_in_manual, "in manual"),
        (d.changes_in_gaps, "inside data gaps"),
        (d.returned_excursions, "that returned before holding"),
    ];
    for (n, why) in skipped {
        if n > 0 {
            writeln!(
                out,
                "  not scored: {} {why}",
                crate::units::count(n, "setpoint change", "setpoint changes")
            )?;
        }
    }
    Ok(())
}

/// One row per episode, numbers right-aligned and words left-aligned, then the legend and the
/// reasons of the inconclusive ones.
fn episode_table(
    report: &LoopReport,
    load: &LoadReport,
    width: usize,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    let pv_unit = &report.units.pv;
    let sp_head = if pv_unit.is_empty() {
        "SP from → to".to_string()
    } else {
        format!("SP from → to ({pv_unit})")
    };
    let header = [
        "#",
        "start",
        sp_head.as_str(),
        "settled",
        "overshoot",
        "OP sat.",
        "fastest",
        "verdict",
        "confidence",
    ];
    let rows: Vec<[String; 9]> = report
        .episodes
        .iter()
        .enumerate()
        .map(|(i, e)| {
            let start = match load.time_origin {
                Some(o) => absolute(o, e.start_s),
                None => format!("{} s", trim(e.start_s)),
            };
            [
                (i + 1).to_string(),
                start,
                format!("{} → {}", trim(e.sp_from), trim(e.sp_to)),
                opt_s(e.settling_time_s),
                quantity(e.overshoot_pct, "%"),
                format!("{:.0} %", fraction_to_pct(e.saturation_duty)),
                opt_s(e.min_settling_time_s),
                e.verdict.label().to_string(),
                e.confidence.map_or("—", |c| c.label()).to_string(),
            ]
        })
        .collect();
    let mut widths = header.map(|h| h.chars().count());
    for r in &rows {
        for (w, c) in widths.iter_mut().zip(r) {
            *w = (*w).max(c.chars().count());
        }
    }
    writeln!(out, "{}", aligned(&header.map(String::from), widths))?;
    for r in &rows {
        writeln!(out, "{}", aligned(r, widths))?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "settled = time until the PV stays inside the band; fastest = quickest settling the OP \
         limit allows (t*)."
    )?;
    let odd: Vec<String> = report
        .episodes
        .iter()
        .enumerate()
        .filter(|(_, e)| e.verdict == Verdict::Inconclusive)
        .map(|(i, e)| format!("#{}: {}", i + 1, e.reason))
        .collect();
    if !odd.is_empty() {
        writeln!(out, "Inconclusive:")?;
        for l in odd {
            para(out, width, "  ", &l)?;
        }
    }
    watch_list(report, width, out)
}

/// The marginal verdicts, to watch: why each is marginal, its t* range, and the step that would
/// decide it.
fn watch_list(report: &LoopReport, width: usize, out: &mut dyn Write) -> anyhow::Result<()> {
    let marginal: Vec<(usize, &crate::analysis::EpisodeResult)> = report
        .episodes
        .iter()
        .enumerate()
        .filter(|(_, e)| e.is_marginal())
        .collect();
    if marginal.is_empty() {
        return Ok(());
    }
    writeln!(
        out,
        "Marginal, to watch (these raise no alert and drive no advice):"
    )?;
    for (i, e) in marginal {
        let range = e
            .min_settling_time_range_s
            .map_or(String::new(), |[lo, hi]| {
                format!(
                    " (fastest possible settling {} to {})",
                    human_duration(lo),
                    human_duration(hi)
                )
            });
        para(
            out,
            width,
            "  ",
            &format!(
                "#{}: {}{range} — {}",
                i + 1,
                e.verdict.label(),
                e.confidence_reasons.join("; ")
            ),
        )?;
        if let Some(x) = &e.deciding_step {
            para(out, width, "      ", &format!("to decide it: {}", x.plan))?;
        }
    }
    Ok(())
}

/// One table line: numbers right-aligned, words left-aligned, two spaces between columns.
fn aligned(cells: &[String; 9], widths: [usize; 9]) -> String {
    let mut s = String::new();
    for (i, (c, w)) in cells.iter().zip(widths).enumerate() {
        let pad = " ".repeat(w - c.chars().count());
        if matches!(i, 0 | 3 | 4 | 5 | 6) {
            s.push_str(&pad);
            s.push_str(c);
        } else {
            s.push_str(c);
            s.push_str(&pad);
        }
        s.push_str("  ");
    }
    s.trim_end().to_string()
}

/// A number without trailing zeros.
fn trim(x: f64) -> String {
    let s = format!("{x:.3}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.into() }
}
