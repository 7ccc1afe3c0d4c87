//! The summary's pictures, drawn with plotters into SVG strings: one setpoint change (SP, PV
//! inside its spec band, the spec time, the fastest possible response t*, and the OP with its
//! limits and the stretches it spent at one), one load disturbance (SP, PV in the hold band, and
//! the same OP panel), and a loop's eight-week trend.
//!
//! Pure: samples in, SVG text out. Colours are our own palette (see `report/templates`); every
//! series is also told apart by line style and named in a legend, so a grey-scale print or a
//! colour-blind reader loses nothing.

use super::section::TellingEpisode;
use super::trend::TrendWeek;
use crate::analysis::{OpRange, Spec};
use crate::units::{fraction_to_pct, human_duration, pct_to_fraction, quantity};
use plotters::coord::Shift;
use plotters::prelude::*;

mod disturbance;
pub use disturbance::disturbance_svg;

/// The stored samples around one change: (ms since the epoch, value), oldest first.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct EpisodeSamples {
    pub sp: Vec<(i64, f64)>,
    pub pv: Vec<(i64, f64)>,
    pub op: Vec<(i64, f64)>,
}

const INK: RGBColor = RGBColor(0x22, 0x2b, 0x33);
const SP_COLOUR: RGBColor = RGBColor(0x22, 0x2b, 0x33);
const PV_COLOUR: RGBColor = RGBColor(0x1f, 0x5f, 0x99);
// No red, amber or green: those read as an alarm display's status colours, and the lines are
// told apart by style and legend anyway.
const BAND_COLOUR: RGBColor = RGBColor(0x3f, 0x7f, 0x8f);
const FASTEST_COLOUR: RGBColor = RGBColor(0x8c, 0x4a, 0x8c);
const OP_COLOUR: RGBColor = RGBColor(0x2d, 0x58, 0x73);
const LIMIT_COLOUR: RGBColor = RGBColor(0x5b, 0x66, 0x70);
const GRID: RGBColor = RGBColor(0xe6, 0xe9, 0xec);
const GRID_BOLD: RGBColor = RGBColor(0xcf, 0xd5, 0xda);

/// Points drawn per line at most; longer series are thinned to each bucket's min and max, which
/// keeps every peak visible.
const MAX_POINTS: usize = 1_200;

const FONT: &str = "sans-serif";

/// A time axis in the unit the text uses for a span this long (the choice of
/// [`human_duration`], read back from its text so there is one rule): the unit's name and its
/// length in seconds.
fn time_unit(span_s: f64) -> (&'static str, f64) {
    match human_duration(span_s).rsplit(' ').next() {
        Some("days") => ("days", 86_400.0),
        Some("h") => ("h", 3_600.0),
        Some("min") => ("min", 60.0),
        _ => ("s", 1.0),
    }
}

/// The units of one change's picture's value axes; the time axis takes the unit that fits.
pub struct PlotUnits<'a> {
    pub pv: &'a str,
    pub op: &'a str,
}

/// Draws one change. `margin_pct` is the saturation margin (% of the OP span).
pub fn episode_svg(
    e: &TellingEpisode,
    spec: Option<&Spec>,
    op: Option<&OpRange>,
    margin_pct: f64,
    s: &EpisodeSamples,
    units: &PlotUnits,
) -> Result<String, PlotError> {
    svg((760, 430), "change", |root| {
        root.fill(&WHITE)?;
        let t0 = e.start_ms;
        let span_s = (crate::units::ms_to_s(e.end_ms - t0))
            .max(spec.map_or(0.0, |sp| sp.settle_within_s) * 1.05);
        let (unit, per) = time_unit(span_s);
        let at = |ms: i64| crate::units::ms_to_s(ms - t0) / per;
        let x_end = span_s / per;
        let x_start = -0.1 * x_end.max(1.0 / per);
        let pv = Panel {
            pv: thin(&s.pv, at),
            sp: step_points(&thin(&s.sp, at), x_end),
            fastest: fastest_response(e, spec, span_s, per),
        };
        let op_pts = thin(&s.op, at);
        let (upper, lower) = root.split_vertically(270);
        draw_pv_panel(&upper, e, spec, pv, units.pv, (x_start..x_end, per))?;
        let axis = format!("{unit} after the setpoint change");
        draw_op_panel(
            &lower,
            op,
            margin_pct,
            op_pts,
            units.op,
            (x_start..x_end, &axis),
        )
    })
}

/// A picture that could not be drawn: a bug in this version, not in the data. Its message is
/// the drawing library's; the caller says which picture.
#[derive(Debug, thiserror::Error)]
#[error("{source}")]
pub struct PlotError {
    /// Which picture: `change`, `disturbance` or `trend`.
    pub picture: &'static str,
    source: DrawError,
}

type DrawError = Box<dyn std::error::Error + Send + Sync>;
type DrawResult = Result<(), DrawError>;

/// Draws one picture of `size` pixels into an SVG string.
fn svg(
    size: (u32, u32),
    picture: &'static str,
    draw: impl FnOnce(&DrawingArea<SVGBackend, Shift>) -> DrawResult,
) -> Result<String, PlotError> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        draw(&root)
            .and_then(|()| Ok(root.present()?))
            .map_err(|source| PlotError { picture, source })?;
    }
    Ok(svg)
}

/// The lines of the upper panel: PV, SP as steps, and the response with the OP driven to its
/// limit (when there is a model and a spec).
struct Panel {
    pv: Vec<(f64, f64)>,
    sp: Vec<(f64, f64)>,
    fastest: Option<Fastest>,
}

/// The response with the OP driven to its limit at the change: entering the band at t* (the
/// fastest possible settling), or, for an unreachable change, levelling off short of the new
/// setpoint (no t* exists).
struct Fastest {
    /// `None` for an unreachable change.
    t_star_s: Option<f64>,
    /// Where the PV levels off with the OP held at its limit.
    plateau: f64,
    curve: Vec<(f64, f64)>,
}

/// The response with the OP driven to its limit, over `span_s` seconds, in time units of `per`
/// seconds. Only a reported bound is drawn (a bound the change beat is not one): a reachable
/// change without t* gets no curve.
fn fastest_response(
    e: &TellingEpisode,
    spec: Option<&Spec>,
    span_s: f64,
    per: f64,
) -> Option<Fastest> {
    let delta = e.sp_to - e.sp_from;
    let m = e.model?;
    let band = spec?.band_abs(delta);
    // The curve starts where the plant was at the change.
    let y0 = e.start_pv.unwrap_or(e.sp_from);
    let reach = m.gain.abs() * e.op_headroom;
    let sign = (e.sp_to - y0).signum();
    let unreachable = e.verdict == crate::analysis::Verdict::Unreachable;
    let t_star = if unreachable {
        f64::INFINITY
    } else {
        e.min_settling_time_s?
    };
    let n = 200;
    let curve = (0..=n)
        .map(|i| {
            let t = span_s * i as f64 / n as f64;
            let y = if t <= m.dead_time_s {
                y0
            } else if t <= t_star {
                y0 + sign * reach * (1.0 - (-(t - m.dead_time_s) / m.time_constant_s).exp())
            } else {
                // Inside the band the OP backs off and the PV closes on the setpoint.
                e.sp_to - sign * band * (-(t - t_star) / m.time_constant_s).exp()
            };
            (t / per, y)
        })
        .collect();
    Some(Fastest {
        t_star_s: t_star.is_finite().then_some(t_star),
        plateau: y0 + sign * reach,
        curve,
    })
}

/// The PV axis: both setpoints, the PV, the fastest response and the band, with some room.
fn pv_axis(e: &TellingEpisode, band: Option<f64>, p: &Panel) -> (f64, f64) {
    let curve = p.fastest.as_ref().map_or(&[][..], |f| f.curve.as_slice());
    let (mut lo, mut hi) = (e.sp_from.min(e.sp_to), e.sp_from.max(e.sp_to));
    for (_, y) in p.pv.iter().chain(curve) {
        lo = lo.min(*y);
        hi = hi.max(*y);
    }
    if let Some(w) = band {
        lo = lo.min(e.sp_to - w);
        hi = hi.max(e.sp_to + w);
    }
    let pad = 0.08 * (hi - lo).max(1e-6);
    (lo - pad, hi + pad)
}

/// The upper panel: SP, PV inside the spec band, the spec time and the fastest response.
fn draw_pv_panel(
    area: &DrawingArea<SVGBackend, Shift>,
    e: &TellingEpisode,
    spec: Option<&Spec>,
    p: Panel,
    pv_unit: &str,
    (xs, per): (std::ops::Range<f64>, f64),
) -> DrawResult {
    let band = spec.map(|sp| sp.band_abs(e.sp_to - e.sp_from));
    let (lo, hi) = pv_axis(e, band, &p);
    let x_end = xs.end;
    let mut chart = pv_chart(area, xs, lo..hi, pv_unit)?;
    if let Some(w) = band {
        chart
            .draw_series(std::iter::once(Rectangle::new(
                [(0.0, e.sp_to - w), (x_end, e.sp_to + w)],
                BAND_COLOUR.mix(0.18).filled(),
            )))?
            .label("spec band around the new SP")
            .legend(box_key(BAND_COLOUR.mix(0.3).filled()));
    }
    if let Some(sp) = spec {
        let ts = sp.settle_within_s / per;
        chart
            .draw_series(DashedLineSeries::new(
                [(ts, lo), (ts, hi)],
                6,
                4,
                BAND_COLOUR.stroke_width(2),
            ))?
            .label(format!(
                "spec time ({})",
                human_duration(sp.settle_within_s)
            ))
            .legend(line_key(BAND_COLOUR.stroke_width(2)));
    }
    line(&mut chart, p.sp, SP_COLOUR.stroke_width(1), "SP")?;
    line(&mut chart, p.pv, PV_COLOUR.stroke_width(2), "PV")?;
    if let Some(f) = p.fastest {
        let label = match f.t_star_s {
            Some(t) => format!(
                "fastest possible, OP at its limit (t* = {})",
                human_duration(t)
            ),
            None => format!(
                "OP held at its limit: levels off at {}, short of the SP (unreachable, no t*)",
                quantity(f.plateau, pv_unit)
            ),
        };
        chart
            .draw_series(DashedLineSeries::new(
                f.curve,
                3,
                3,
                FASTEST_COLOUR.stroke_width(2),
            ))?
            .label(label)
            .legend(line_key(FASTEST_COLOUR.stroke_width(2)));
        if let Some(t) = f.t_star_s {
            let ts = t / per;
            chart.draw_series(DashedLineSeries::new(
                [(ts, lo), (ts, hi)],
                2,
                3,
                FASTEST_COLOUR.stroke_width(1),
            ))?;
        }
    }
    draw_legend(&mut chart)
}

/// The axes and grid of an upper panel, SP and PV over time.
fn pv_chart<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    xs: std::ops::Range<f64>,
    ys: std::ops::Range<f64>,
    pv_unit: &str,
) -> Result<Chart<'a, 'b>, DrawError> {
    let pv_label = if pv_unit.is_empty() {
        "SP, PV".to_string()
    } else {
        format!("SP, PV ({pv_unit})")
    };
    let mut chart = ChartBuilder::on(area)
        .margin_top(10)
        .margin_right(16)
        .x_label_area_size(24)
        .y_label_area_size(64)
        .build_cartesian_2d(xs, ys)?;
    chart
        .configure_mesh()
        .light_line_style(WHITE)
        .bold_line_style(GRID_BOLD)
        .y_desc(pv_label)
        .label_style((FONT, 14).into_font().color(&INK))
        .axis_desc_style((FONT, 15).into_font().color(&INK))
        .x_labels(10)
        .y_labels(6)
        .draw()?;
    Ok(chart)
}

/// The lower panel: OP with its limits and the stretches spent at one.
fn draw_op_panel(
    area: &DrawingArea<SVGBackend, Shift>,
    op: Option<&OpRange>,
    margin_pct: f64,
    op_pts: Vec<(f64, f64)>,
    op_unit: &str,
    (xs, x_desc): (std::ops::Range<f64>, &str),
) -> DrawResult {
    let (op_lo, op_hi) = match op {
        Some(r) => (r.min, r.max),
        // Without a range or samples, the usual one keeps the axes drawable.
        None => value_range(&op_pts).unwrap_or((OpRange::DEFAULT.min, OpRange::DEFAULT.max)),
    };
    let op_pad = 0.06 * (op_hi - op_lo).abs().max(1e-6);
    let (x_start, x_end) = (xs.start, xs.end);
    let mut chart = ChartBuilder::on(area)
        .margin_right(16)
        .margin_bottom(6)
        .x_label_area_size(36)
        .y_label_area_size(64)
        .build_cartesian_2d(xs, (op_lo - op_pad)..(op_hi + op_pad))?;
    chart
        .configure_mesh()
        .light_line_style(WHITE)
        .bold_line_style(GRID_BOLD)
        .x_desc(x_desc)
        .y_desc(if op_unit.is_empty() {
            "OP".to_string()
        } else {
            format!("OP ({op_unit})")
        })
        .label_style((FONT, 14).into_font().color(&INK))
        .axis_desc_style((FONT, 15).into_font().color(&INK))
        .x_labels(10)
        .y_labels(4)
        .draw()?;
    if let Some(r) = op {
        let stretches = saturated_stretches(&op_pts, r, pct_to_fraction(margin_pct));
        if !stretches.is_empty() {
            chart
                .draw_series(stretches.into_iter().map(|(a, b)| {
                    Rectangle::new(
                        [(a, op_lo - op_pad), (b, op_hi + op_pad)],
                        LIMIT_COLOUR.mix(0.14).filled(),
                    )
                }))?
                .label("OP at a limit (shaded)")
                .legend(box_key(LIMIT_COLOUR.mix(0.25).filled()));
        }
        chart
            .draw_series(
                [r.min, r.max]
                    .into_iter()
                    .map(|l| {
                        DashedLineSeries::new(
                            [(x_start, l), (x_end, l)],
                            6,
                            4,
                            LIMIT_COLOUR.stroke_width(1),
                        )
                    })
                    .flat_map(|s| s.into_iter()),
            )?
            .label("OP limits")
            .legend(line_key(LIMIT_COLOUR.stroke_width(1)));
    }
    line(&mut chart, op_pts, OP_COLOUR.stroke_width(2), "OP")?;
    draw_legend(&mut chart)
}

/// The lowest and highest value of some points, `None` for none.
fn value_range<'p>(points: impl IntoIterator<Item = &'p (f64, f64)>) -> Option<(f64, f64)> {
    points.into_iter().fold(None, |r, (_, y)| {
        Some(r.map_or((*y, *y), |(lo, hi): (f64, f64)| (lo.min(*y), hi.max(*y))))
    })
}

/// A solid line with its legend entry.
fn line(chart: &mut Chart, points: Vec<(f64, f64)>, style: ShapeStyle, name: &str) -> DrawResult {
    chart
        .draw_series(LineSeries::new(points, style))?
        .label(name)
        .legend(line_key(style));
    Ok(())
}

/// A legend entry: a short stroke in `style`.
fn line_key(style: ShapeStyle) -> impl Fn((i32, i32)) -> PathElement<(i32, i32)> {
    move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style)
}

/// A legend entry: a small box filled in `style`.
fn box_key(style: ShapeStyle) -> impl Fn((i32, i32)) -> Rectangle<(i32, i32)> {
    move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], style)
}

/// The legend, lower right on a light background.
fn draw_legend<'a, 'b: 'a>(chart: &mut Chart<'a, 'b>) -> DrawResult {
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::LowerRight)
        .background_style(WHITE.mix(0.9))
        .border_style(GRID)
        .label_font((FONT, 14).into_font().color(&INK))
        .draw()?;
    Ok(())
}

/// Times (minutes) where the OP sat within `margin` (a fraction of the span) of a limit, as
/// closed stretches.
fn saturated_stretches(op: &[(f64, f64)], r: &OpRange, margin: f64) -> Vec<(f64, f64)> {
    let at_limit = |v: f64| r.is_at_limit(v, margin);
    let mut out = Vec::new();
    let mut start: Option<f64> = None;
    for (i, (t, v)) in op.iter().enumerate() {
        match (at_limit(*v), start) {
            (true, None) => start = Some(*t),
            (false, Some(a)) => {
                out.push((a, *t));
                start = None;
            }
            _ => {}
        }
        if i + 1 == op.len()
            && let Some(a) = start
        {
            out.push((a, *t));
        }
    }
    out
}

/// Samples as (minutes, value), thinned to at most [`MAX_POINTS`] by keeping each bucket's
/// lowest and highest value in time order.
fn thin(samples: &[(i64, f64)], minutes: impl Fn(i64) -> f64) -> Vec<(f64, f64)> {
    if samples.len() <= MAX_POINTS {
        return samples.iter().map(|(t, v)| (minutes(*t), *v)).collect();
    }
    let per = samples.len().div_ceil(MAX_POINTS / 2);
    let mut out = Vec::with_capacity(MAX_POINTS + 2);
    for chunk in samples.chunks(per) {
        let lo = chunk
            .iter()
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .expect("non-empty chunk");
        let hi = chunk
            .iter()
            .max_by(|a, b| a.1.total_cmp(&b.1))
            .expect("non-empty chunk");
        let (first, second) = if lo.0 <= hi.0 { (lo, hi) } else { (hi, lo) };
        out.push((minutes(first.0), first.1));
        if second.0 != first.0 {
            out.push((minutes(second.0), second.1));
        }
    }
    out
}

/// A setpoint drawn as steps (it holds until the next value), extended to `x_end`.
fn step_points(sp: &[(f64, f64)], x_end: f64) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(2 * sp.len() + 1);
    for (i, (t, v)) in sp.iter().enumerate() {
        if i > 0 {
            out.push((*t, sp[i - 1].1));
        }
        out.push((*t, *v));
    }
    if let Some((t, v)) = sp.last()
        && *t < x_end
    {
        out.push((x_end, *v));
    }
    out
}

/// The eight-week trend: share of judged changes that met the spec, and the median settling
/// time beside the spec time.
pub fn trend_svg(weeks: &[TrendWeek], spec: Option<&Spec>) -> Result<String, PlotError> {
    svg((760, 230), "trend", |root| draw_trend(root, weeks, spec))
}

/// A period's label short enough for a trend axis: `W48` for an ISO week, the end's month and
/// day (`12-02`) for a free range.
fn axis_label(label: &str) -> String {
    match label.split_once(" to ") {
        Some((_, end)) => end.get(5..10).unwrap_or(end).to_string(),
        None => label.rsplit('-').next().unwrap_or(label).to_string(),
    }
}

fn draw_trend(
    root: &DrawingArea<SVGBackend, Shift>,
    weeks: &[TrendWeek],
    spec: Option<&Spec>,
) -> DrawResult {
    root.fill(&WHITE)?;
    let (left, right) = root.split_horizontally(380);
    let n = weeks.len().max(1);
    let labels: Vec<String> = weeks.iter().map(|w| axis_label(&w.label)).collect();
    let label_of = |x: &f64| {
        let i = x.round();
        if (x - i).abs() < 1e-6 && i >= 0.0 {
            labels.get(i as usize).cloned().unwrap_or_default()
        } else {
            String::new()
        }
    };
    let x_range = -0.5..(n as f64 - 0.5);

    let mut chart = trend_chart(
        &left,
        "met the spec (% of judged changes)",
        40,
        (x_range.clone(), 0.0..105.0),
        &label_of,
        n,
    )?;
    let shares: Vec<Option<(f64, f64)>> = weeks
        .iter()
        .enumerate()
        .map(|(i, w)| w.met_share.map(|s| (i as f64, fraction_to_pct(s))))
        .collect();
    draw_segments(&mut chart, &shares, BAND_COLOUR)?;

    let top_s = weeks
        .iter()
        .filter_map(|w| w.median_settling_s)
        .chain(spec.map(|s| s.settle_within_s))
        .fold(1.0_f64, f64::max);
    // The axis in the unit the text gives the largest of its times in.
    let (unit, per) = time_unit(top_s);
    let settle: Vec<Option<(f64, f64)>> = weeks
        .iter()
        .enumerate()
        .map(|(i, w)| w.median_settling_s.map(|s| (i as f64, s / per)))
        .collect();
    let mut chart = trend_chart(
        &right,
        &format!("median settling time ({unit}); dashed: spec"),
        48,
        (x_range, 0.0..top_s / per * 1.15),
        &label_of,
        n,
    )?;
    if let Some(s) = spec {
        let spec_t = s.settle_within_s / per;
        chart.draw_series(DashedLineSeries::new(
            [(-0.5, spec_t), (n as f64 - 0.5, spec_t)],
            6,
            4,
            LIMIT_COLOUR.stroke_width(1),
        ))?;
    }
    draw_segments(&mut chart, &settle, PV_COLOUR)?;
    Ok(())
}

type Chart<'a, 'b> = ChartContext<
    'a,
    SVGBackend<'b>,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

/// One of the two trend charts: its caption, axes and grid, with week labels on the x axis.
fn trend_chart<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    caption: &str,
    y_label_area: u32,
    (x, y): (std::ops::Range<f64>, std::ops::Range<f64>),
    label_of: &dyn Fn(&f64) -> String,
    weeks: usize,
) -> Result<Chart<'a, 'b>, DrawError> {
    let mut chart = ChartBuilder::on(area)
        .caption(caption, (FONT, 15).into_font().color(&INK))
        .margin(8)
        .x_label_area_size(22)
        .y_label_area_size(y_label_area)
        .build_cartesian_2d(x, y)?;
    chart
        .configure_mesh()
        .light_line_style(WHITE)
        .bold_line_style(GRID_BOLD)
        .x_labels(weeks)
        .x_label_formatter(label_of)
        .y_labels(6)
        .label_style((FONT, 14).into_font().color(&INK))
        .draw()?;
    Ok(chart)
}

/// A line through the weeks that have a value, broken where one has none, with a dot per week.
fn draw_segments(chart: &mut Chart, points: &[Option<(f64, f64)>], colour: RGBColor) -> DrawResult {
    for run in points.split(|p| p.is_none()) {
        let run: Vec<(f64, f64)> = run.iter().flatten().copied().collect();
        if run.len() > 1 {
            chart.draw_series(LineSeries::new(run, colour.stroke_width(2)))?;
        }
    }
    chart.draw_series(
        points
            .iter()
            .flatten()
            .map(|p| Circle::new(*p, 4, colour.filled())),
    )?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_axes_use_the_unit_of_the_text() {
        assert_eq!(time_unit(90.0), ("s", 1.0));
        assert_eq!(time_unit(1_400.0), ("min", 60.0));
        assert_eq!(time_unit(14_400.0), ("h", 3_600.0));
        assert_eq!(time_unit(5.0 * 86_400.0), ("days", 86_400.0));
    }

    #[test]
    fn trend_axis_labels_are_short() {
        assert_eq!(axis_label("2026-W48"), "W48");
        assert_eq!(axis_label("2026-11-25 08:03 to 2026-12-02 08:03"), "12-02");
    }

    #[test]
    fn saturated_stretches_cover_the_samples_at_either_limit() {
        let r = OpRange {
            min: 0.0,
            max: 100.0,
        };
        let op = [
            (0.0, 50.0),
            (1.0, 99.8),
            (2.0, 100.0),
            (3.0, 80.0),
            (4.0, 0.2),
            (5.0, 0.0),
        ];
        // 0.5 % of a 0–100 span.
        assert_eq!(
            saturated_stretches(&op, &r, 0.005),
            [(1.0, 3.0), (4.0, 5.0)]
        );
    }

    #[test]
    fn thinning_keeps_the_extremes_of_a_long_series() {
        let long: Vec<(i64, f64)> = (0..100_000)
            .map(|i| (i, if i == 54_321 { 9.0 } else { (i % 7) as f64 }))
            .collect();
        let thin = thin(&long, |t| t as f64);
        assert!(thin.len() <= MAX_POINTS + 2, "{}", thin.len());
        assert!(thin.iter().any(|p| p == &(54_321.0, 9.0)));
        assert!(thin.windows(2).all(|w| w[0].0 <= w[1].0), "time order");
    }

    #[test]
    fn a_setpoint_is_drawn_as_steps() {
        let sp = [(0.0, 1.0), (2.0, 3.0)];
        assert_eq!(
            step_points(&sp, 5.0),
            [(0.0, 1.0), (2.0, 1.0), (2.0, 3.0), (5.0, 3.0)]
        );
    }
}
