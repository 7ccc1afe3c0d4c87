//! The regulation findings in words, with units, for every place people read them (`analyze`,
//! the weekly summary, the demo, alerts): one wording, written here.

use super::{Cause, Disturbance, DisturbanceCounts, DisturbanceVerdict, Oscillation, Regulation};
use crate::units::{Units, count, fraction_to_pct, human_duration, quantity, signed_quantity};

/// Lines describing a loop's regulation: how long it was held, the band and the PV's spread,
/// the OP's figures, the minimum-variance index, the oscillation finding and the disturbances.
/// `dead_time_s` is the model's, which the index is judged against.
pub fn lines(r: &Regulation, units: &Units, dead_time_s: Option<f64>) -> Vec<String> {
    if r.hold_hours <= 0.0 {
        return vec![
            "No held-setpoint stretches in the data (the SP was always moving, settling, in \
             manual or in a gap)."
                .to_owned(),
        ];
    }
    let mut out = vec![format!(
        "Held setpoint for {} in all.",
        human_duration(r.hold_hours * 3600.0)
    )];
    if let (Some(band), Some(sd)) = (r.hold_band, r.pv_sd) {
        out.push(format!(
            "PV standard deviation about SP {} against a hold band of ±{} (PV noise σ {}).",
            quantity(sd, &units.pv),
            quantity(band, &units.pv),
            r.pv_noise_sd
                .map_or("not estimated".to_owned(), |s| quantity(s, &units.pv)),
        ));
    }
    if let (Some(at), Some(travel), Some(rev)) = (
        r.time_at_limit_frac,
        r.op_travel_per_h,
        r.op_reversals_per_h,
    ) {
        out.push(format!(
            "OP at a limit {} of the held time; OP travel {} per hour; {} reversals per hour.",
            quantity(fraction_to_pct(at), "%"),
            quantity(travel, &units.op),
            crate::units::sig(rev, crate::units::DISPLAY_DIGITS),
        ));
    }
    out.push(match (r.min_variance_index, dead_time_s) {
        (Some(eta), Some(theta)) => format!(
            "Minimum-variance (Harris) index {} (1 = minimum variance for the dead time of {}).",
            crate::units::sig(eta, 2),
            human_duration(theta)
        ),
        _ => "Minimum-variance (Harris) index not estimated (it needs the process model's dead \
              time and enough held data)."
            .to_owned(),
    });
    out.push(oscillation(&r.oscillation, units));
    out.push(disturbances(&r.disturbances));
    out.extend(largest(&r.disturbances, units));
    out
}

/// The oscillation finding in one sentence, with its evidence.
pub fn oscillation(o: &Oscillation, units: &Units) -> String {
    if !o.detected {
        return "Oscillation: none found (Hägglund's test on the control error).".to_owned();
    }
    let period = o.period_s.map_or("not measured".to_owned(), human_duration);
    let amplitude = o
        .amplitude
        .map_or("not measured".to_owned(), |a| quantity(a, &units.pv));
    let cause = match o.likely_cause {
        Some(c) => format!("likely cause {}", c.label()),
        None => "cause not judged".to_owned(),
    };
    let evidence = o.evidence.as_deref().unwrap_or("no evidence recorded");
    format!("Oscillation: period {period}, amplitude ±{amplitude}; {cause}: {evidence}.")
}

/// How many disturbances of each verdict, in one sentence.
pub fn disturbances(list: &[Disturbance]) -> String {
    if list.is_empty() {
        return "Load disturbances: none left the hold band.".to_owned();
    }
    let counts = DisturbanceCounts::of(list);
    let parts: Vec<String> = [
        DisturbanceVerdict::Recovered,
        DisturbanceVerdict::ActuatorLimited,
        DisturbanceVerdict::NotRecovered,
        DisturbanceVerdict::Inconclusive,
    ]
    .into_iter()
    .filter(|v| counts.with(*v) > 0)
    .map(|v| format!("{} {}", counts.with(v), v.label()))
    .collect();
    let spec = if counts.missed_spec > 0 {
        format!(
            "; {} slower than the spec's recovery time",
            count(counts.missed_spec, "was", "were")
        )
    } else {
        String::new()
    };
    format!(
        "Load disturbances: {} ({}){spec}.",
        list.len(),
        parts.join(", ")
    )
}

/// One disturbance: its peak, how it ended, what the OP did.
pub fn disturbance(d: &Disturbance, units: &Units) -> String {
    let ended = match d.recovery_time_s {
        Some(r) => format!("back inside the hold band after {}", human_duration(r)),
        None => "not back inside the hold band before the hold ended".to_owned(),
    };
    let missed = d.missed_spec.map_or(String::new(), |m| {
        format!(", slower than the spec allows: {}", m.label())
    });
    format!(
        "{} from SP, {}, OP at a limit for {} of it, {}{missed}",
        signed_quantity(d.peak_deviation, &units.pv),
        ended,
        quantity(fraction_to_pct(d.op_at_limit_frac), "%"),
        d.verdict.label()
    )
}

/// The sentence on the largest disturbance, if there is one.
pub fn largest(list: &[Disturbance], units: &Units) -> Option<String> {
    worst(list).map(|d| format!("Largest: {}.", disturbance(d, units)))
}

/// The disturbance with the largest peak deviation.
pub fn worst(list: &[Disturbance]) -> Option<&Disturbance> {
    list.iter()
        .max_by(|a, b| a.peak_deviation.abs().total_cmp(&b.peak_deviation.abs()))
}

/// What an oscillation between changes means for the loop's advice, when its cause is judged:
/// a caution beside the recommendation, so that no one retunes a sticking valve.
pub fn caution(o: &Oscillation) -> Option<String> {
    if !o.detected {
        return None;
    }
    Some(match o.likely_cause? {
        Cause::Valve => "Between setpoint changes the loop cycles, and the OP–PV shape points at \
             the valve (stiction or deadband): have the valve checked before retuning; retuning \
             does not cure a sticking valve."
            .to_owned(),
        Cause::Tuning => "Between setpoint changes the loop cycles by itself, at a period of a \
             few dead times: the controller is too aggressive for the process, and gentler \
             settings should stop it."
            .to_owned(),
        Cause::Load => "Between setpoint changes the loop cycles at a period far from its own: \
             the cycle enters from outside (an upstream loop, a periodic load); find its source \
             before retuning."
            .to_owned(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::sim::{LoopSim, LoopSimConfig, PiController};
    use crate::analysis::{LoopSetup, OpRange, Spec, analyze_loop, sim};

    #[test]
    fn a_loop_cycling_by_its_tuning_gets_a_caution_beside_its_advice() {
        // The jacketed vessel (K 0.8 °C/%, τ 300 s, θ 30 s) under Kc 20 %/°C, about its
        // ultimate gain (ω_u ≈ 0.055 rad/s, period ≈ 115 s, about 4 dead times): it cycles
        // between its setpoint changes, bounded by the valve.
        let mut cfg = LoopSimConfig::jacketed_vessel(100.0, 4);
        cfg.controller = PiController::on_percent(20.0, 240.0);
        let schedule = [
            (3000.0, 53.0),
            (6000.0, 50.0),
            (9000.0, 54.0),
            (12000.0, 51.0),
        ];
        let samples = LoopSim::new(cfg).run(&schedule, 15_000.0, 1.0);
        let mut setup = LoopSetup::new("TIC-1", Spec::within(120.0));
        setup.op = OpRange::DEFAULT;
        let report = analyze_loop(&sim::series(&samples, 0.0), &setup);
        let o = &report.regulation.oscillation;
        assert!(o.detected, "{:?}", report.regulation);
        assert_eq!(o.likely_cause, Some(Cause::Tuning), "{o:?}");
        assert!(
            report
                .recommendation
                .cautions
                .iter()
                .any(|c| c.contains("too aggressive")),
            "{:?}",
            report.recommendation.cautions
        );
    }

    #[test]
    fn no_caution_without_an_oscillation_or_a_judged_cause() {
        let mut o = Oscillation {
            detected: false,
            period_s: None,
            amplitude: None,
            likely_cause: Some(Cause::Valve),
            evidence: None,
        };
        assert_eq!(caution(&o), None);
        o.detected = true;
        assert!(caution(&o).unwrap().contains("valve checked"));
        o.likely_cause = None;
        assert_eq!(caution(&o), None);
    }
}
