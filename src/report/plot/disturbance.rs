//! The picture of one load disturbance: SP, PV and the hold band around the SP above, and
//! below the OP panel the change's picture has too, so one way of reading serves both.

use super::{
    BAND_COLOUR, DrawResult, EpisodeSamples, FASTEST_COLOUR, PV_COLOUR, PlotError, PlotUnits,
    SP_COLOUR, box_key, draw_legend, draw_op_panel, line, line_key, pv_chart, step_points, svg,
    thin, time_unit, value_range,
};
use crate::analysis::regulation::Disturbance;
use crate::analysis::{AnalysisOptions, OpRange};
use crate::units::{human_duration, ms_to_s, quantity, s_to_ms};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Draws one load disturbance: SP, PV and the hold band around the SP above; below, the OP
/// with its limits and the stretches it sat at one, by the margin the regulation analysis
/// counts with ([`OpRange::is_saturated`]). Time runs from when the PV left the band.
pub fn disturbance_svg(
    d: &Disturbance,
    hold_band: Option<f64>,
    op: Option<&OpRange>,
    s: &EpisodeSamples,
    units: &PlotUnits,
) -> Result<String, PlotError> {
    svg((760, 430), "disturbance", |root| {
        root.fill(&WHITE)?;
        let t0 = s_to_ms(d.start_s);
        let (first, last) = match (s.pv.first(), s.pv.last()) {
            (Some(a), Some(b)) => (a.0.min(t0), b.0.max(t0 + 1_000)),
            _ => (t0, t0 + 1_000),
        };
        let (unit, per) = time_unit(ms_to_s(last - t0));
        let at = |ms: i64| ms_to_s(ms - t0) / per;
        let xs = at(first)..at(last);
        let lines = HoldLines {
            pv: thin(&s.pv, at),
            sp: step_points(&thin(&s.sp, at), xs.end),
            recovered: d.recovery_time_s.map(|r| (r, r / per)),
        };
        let (upper, lower) = root.split_vertically(270);
        draw_hold_panel(&upper, hold_band, lines, units.pv, xs.clone())?;
        let axis = format!("{unit} after the PV left the hold band");
        draw_op_panel(
            &lower,
            op,
            AnalysisOptions::DEFAULT_SATURATION_MARGIN_PCT,
            thin(&s.op, at),
            units.op,
            (xs, &axis),
        )
    })
}

/// The lines of a disturbance's upper panel, in the panel's time unit.
struct HoldLines {
    pv: Vec<(f64, f64)>,
    sp: Vec<(f64, f64)>,
    /// The recovery time (s) and where it falls on the time axis, when the PV came back.
    recovered: Option<(f64, f64)>,
}

/// The upper panel of a disturbance: the hold band around the SP, the SP and the PV, and
/// dotted lines where the PV left the band and where it was back inside for good.
fn draw_hold_panel(
    area: &DrawingArea<SVGBackend, Shift>,
    band: Option<f64>,
    p: HoldLines,
    pv_unit: &str,
    xs: std::ops::Range<f64>,
) -> DrawResult {
    // The SP held when the PV left the band.
    let sp_at =
        p.sp.iter()
            .rev()
            .find(|(t, _)| *t <= 0.0)
            .or(p.sp.first())
            .map(|(_, v)| *v);
    let sp_band = band.zip(sp_at).map(|(w, c)| [(0.0, c - w), (0.0, c + w)]);
    let (lo, hi) =
        value_range(p.pv.iter().chain(&p.sp).chain(sp_band.iter().flatten())).unwrap_or((0.0, 1.0));
    let pad = 0.08 * (hi - lo).max(1e-6);
    let (lo, hi) = (lo - pad, hi + pad);
    let (x_start, x_end) = (xs.start, xs.end);
    let mut chart = pv_chart(area, xs, lo..hi, pv_unit)?;
    if let (Some(w), Some(c)) = (band, sp_at) {
        chart
            .draw_series(std::iter::once(Rectangle::new(
                [(x_start, c - w), (x_end, c + w)],
                BAND_COLOUR.mix(0.18).filled(),
            )))?
            .label(format!(
                "hold band around the SP (±{})",
                quantity(w, pv_unit)
            ))
            .legend(box_key(BAND_COLOUR.mix(0.3).filled()));
    }
    let mark =
        |x: f64| DashedLineSeries::new([(x, lo), (x, hi)], 2, 3, FASTEST_COLOUR.stroke_width(1));
    chart
        .draw_series(mark(0.0))?
        .label("left the hold band")
        .legend(line_key(FASTEST_COLOUR.stroke_width(1)));
    if let Some((r, x)) = p.recovered {
        chart
            .draw_series(mark(x))?
            .label(format!("back inside for good after {}", human_duration(r)))
            .legend(line_key(FASTEST_COLOUR.stroke_width(1)));
    }
    line(&mut chart, p.sp, SP_COLOUR.stroke_width(1), "SP")?;
    line(&mut chart, p.pv, PV_COLOUR.stroke_width(2), "PV")?;
    draw_legend(&mut chart)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_disturbance_is_drawn_with_its_hold_band_recovery_and_op_at_its_limit() {
        use crate::analysis::regulation::DisturbanceVerdict;
        // 20 min out of the band at 1 s with the OP at its top limit, 2 min either side.
        let t0_ms = 1_795_600_000_000;
        let at = |k: i64| t0_ms + k * 1_000;
        let out = |k: i64| (0..1_200).contains(&k);
        let samples = EpisodeSamples {
            sp: vec![(at(-120), 50.0)],
            pv: (-120..1_320)
                .map(|k| (at(k), if out(k) { 47.0 } else { 50.0 }))
                .collect(),
            op: (-120..1_320)
                .map(|k| (at(k), if out(k) { 100.0 } else { 40.0 }))
                .collect(),
        };
        let d = Disturbance {
            start_s: ms_to_s(t0_ms),
            end_s: ms_to_s(at(1_200)),
            peak_deviation: -3.0,
            recovery_time_s: Some(1_200.0),
            op_at_limit_frac: 1.0,
            verdict: DisturbanceVerdict::ActuatorLimited,
            missed_spec: None,
        };
        let units = PlotUnits { pv: "°C", op: "%" };
        let svg =
            disturbance_svg(&d, Some(0.2), Some(&OpRange::DEFAULT), &samples, &units).unwrap();
        roxmltree::Document::parse(&svg).unwrap();
        for label in [
            "hold band around the SP (±0.200 °C)",
            "back inside for good after 20.0 min",
            "OP at a limit (shaded)",
            "min after the PV left the hold band",
        ] {
            assert!(svg.contains(label), "no {label:?}");
        }
        // Without a band, limits or samples it still draws, only with less on it.
        let bare = disturbance_svg(&d, None, None, &EpisodeSamples::default(), &units).unwrap();
        assert!(!bare.contains("hold band around"));
        assert!(!bare.contains("OP at a limit"));
    }
}
