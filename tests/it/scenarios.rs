//! Whole-loop scenarios on simulated data with a known truth: the verdicts and the
//! recommendation must say what the simulated plant makes true.

use crate::common::sim::{series, setup};
use headroom::analysis::assess::Action;
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process};
use headroom::analysis::{LoopReport, Series, Spec, Verdict, analyze_loop};

pub struct Scenario {
    pub process: Process,
    pub controller: PiController,
    pub noise_sd: f64,
    pub sample_s: f64,
    pub initial_sp: f64,
    pub schedule: Vec<(f64, f64)>,
    pub duration_s: f64,
    pub spec: Spec,
}

pub fn simulate(s: &Scenario, seed: u64) -> Series {
    let mut sim = LoopSim::new(LoopSimConfig {
        process: s.process,
        controller: s.controller,
        step_s: (s.sample_s / 10.0).min(0.1),
        noise_sd: s.noise_sd,
        seed,
        initial_sp: s.initial_sp,
    });
    series(&sim.run(&s.schedule, s.duration_s, s.sample_s), 0.0)
}

pub fn analyze(s: &Scenario, seed: u64) -> LoopReport {
    let series = simulate(s, seed);
    analyze_loop(&series, &setup("TIC-1", &s.controller, s.spec))
}

/// A jacketed vessel heated through a valve: K = 0.8 °C/%, τ = 300 s, θ = 30 s, ambient 20 °C.
fn vessel(kc: f64, ti: f64, op_max: f64, schedule: Vec<(f64, f64)>) -> Scenario {
    Scenario {
        process: Process::JACKETED_VESSEL,
        controller: PiController {
            gain: kc,
            integral_time_s: ti,
            op_min: 0.0,
            op_max,
        },
        noise_sd: 0.02,
        sample_s: 2.0,
        initial_sp: 50.0,
        duration_s: schedule.last().unwrap().0 + 3600.0,
        schedule,
        spec: Spec {
            settle_band_pct: 2.0,
            settle_band: None,
            settle_within_s: 600.0,
            max_overshoot_pct: Some(10.0),
            hold_band: None,
            recover_within_s: None,
        },
    }
}

fn steps(values: &[f64]) -> Vec<(f64, f64)> {
    values
        .iter()
        .enumerate()
        .map(|(i, v)| (600.0 + 3600.0 * i as f64, *v))
        .collect()
}

#[test]
fn a_well_tuned_loop_meets_its_spec_and_needs_no_change() {
    // SIMC with τc = θ: Kc = 300/(0.8·60) = 6.25, τI = min(300, 240) = 240.
    let s = vessel(6.25, 240.0, 100.0, steps(&[55.0, 52.0, 57.0, 53.0]));
    let r = analyze(&s, 1);
    assert_eq!(r.episodes.len(), 4, "{r:#?}");
    assert!(
        r.episodes.iter().all(|e| e.verdict == Verdict::Met),
        "{r:#?}"
    );
    assert_eq!(r.recommendation.action, Action::None);
    let m = r.model.expect("model");
    assert!((m.gain - 0.8).abs() / 0.8 < 0.2, "{m:?}");
    assert!((m.time_constant_s - 300.0).abs() / 300.0 < 0.2, "{m:?}");
    assert!((m.dead_time_s - 30.0).abs() < 7.5, "{m:?}");
}

#[test]
fn a_sluggish_loop_with_headroom_is_tuning_limited_and_gets_retune_advice() {
    let s = vessel(0.8, 900.0, 100.0, steps(&[55.0, 52.0, 57.0, 53.0]));
    let r = analyze(&s, 2);
    let c = r.counts;
    assert!(c.tuning_limited >= 3, "{r:#?}");
    assert_eq!(
        r.recommendation.action,
        Action::Retune,
        "{:#?}",
        r.recommendation
    );
    let pi = r.recommendation.retune.unwrap();
    // Verified on the model: it meets the 600 s spec, with Ms within the usual limit of 2.
    assert!(pi.verified.settling_time_s.unwrap() < 600.0, "{pi:?}");
    assert!(
        pi.verified.meets_spec && pi.verified.max_sensitivity <= 2.0,
        "{pi:?}"
    );
    assert_eq!(
        pi.outcome,
        headroom::analysis::advice::RetuneOutcome::MeetsSpec
    );
}

#[test]
fn a_saturating_heater_is_actuator_limited_and_a_huge_step_unreachable() {
    // Valve capped at 60 %: from 50 °C (OP 37.5 %) the reach is 0.8·22.5 = 18 °C.
    // +12 °C needs t* = 30 + 300·ln(18/(18 − 11.76)) ≈ 348 s … fine; +16 °C: t* ≈ 30 + 300·ln(18/2.32) ≈ 645 s > 600.
    let s = vessel(6.25, 240.0, 60.0, steps(&[66.0, 50.0, 66.0, 50.0, 75.0]));
    let r = analyze(&s, 3);
    let v: Vec<Verdict> = r.episodes.iter().map(|e| e.verdict).collect();
    assert_eq!(v[0], Verdict::ActuatorLimited, "{r:#?}");
    assert_eq!(v[2], Verdict::ActuatorLimited, "{r:#?}");
    assert_eq!(v[4], Verdict::Unreachable, "{r:#?}");
    assert!(matches!(
        r.recommendation.action,
        Action::Upgrade | Action::Renegotiate
    ));
    let ev = r.recommendation.actuator.unwrap();
    assert!(ev.capacity_ratio.unwrap() > 1.0, "{ev:?}");
}
