//! The plant's own checks: determinism, schedules, physical ranges, and that the analysis sees
//! what each loop is meant to show, at its setpoint changes and between them.

use super::schedule::{DOSED_RECIPE_C, DROPOUT, TRIAL_STEP};
use super::*;
use crate::analysis::assess::Action;
use crate::analysis::regulation::{Cause, DisturbanceVerdict};
use crate::analysis::sim::Process;
use crate::analysis::{
    self, AnalysisOptions, LoopReport, LoopSetup, OpRange, Series, Spec, Verdict,
};

/// Each loop's readings over `duration_s`, as analysis series (PV gaps left out).
fn record(duration_s: f64) -> Vec<(LoopDef, Series)> {
    record_plant(Plant::new(duration_s), duration_s)
}

/// [`record`] for a given plant.
fn record_plant(mut plant: Plant, duration_s: f64) -> Vec<(LoopDef, Series)> {
    let mut rows: Vec<Vec<Reading>> = vec![Vec::new(); plant.defs().len()];
    plant.advance_to(duration_s, &mut |i, r| rows[i].push(r));
    plant
        .defs()
        .iter()
        .cloned()
        .zip(rows)
        .map(|(d, rows)| {
            let rows: Vec<&Reading> = rows.iter().filter(|r| r.pv.is_some()).collect();
            let series = Series::new(
                rows.iter().map(|r| r.time_s).collect(),
                rows.iter().map(|r| r.sp).collect(),
                rows.iter().map(|r| r.pv.unwrap_or(f64::NAN)).collect(),
                rows.iter().map(|r| r.op).collect(),
                None,
            )
            .expect("a valid series");
            (d, series)
        })
        .collect()
}

/// Each loop of `plant` over `duration_s`, analysed offline as `analyze` would.
fn analysed(plant: Plant, duration_s: f64) -> Vec<(LoopDef, LoopReport)> {
    record_plant(plant, duration_s)
        .into_iter()
        .map(|(d, series)| {
            let report = analysis::analyze_loop(&series, &setup(&d));
            (d, report)
        })
        .collect()
}

fn setup(d: &LoopDef) -> LoopSetup {
    LoopSetup {
        units: crate::analysis::Units {
            pv: d.pv_unit.into(),
            op: crate::analysis::Units::DEFAULT_OP.into(),
        },
        controller: None,
        actuator: None,
        tag: d.tag.into(),
        op: OpRange {
            min: d.op_min(),
            max: d.op_max(),
        },
        spec: Spec {
            settle_band_pct: d.settle_band_pct,
            settle_band: None,
            settle_within_s: d.settle_within_s,
            max_overshoot_pct: d.max_overshoot_pct,
            hold_band: None,
            recover_within_s: None,
        },
        options: AnalysisOptions {
            expected_period_s: Some(d.sample_period_s),
            ..AnalysisOptions::default()
        },
    }
}

#[test]
fn the_same_duration_gives_the_same_samples() {
    let a = record(6.0 * HOUR_S);
    let b = record(6.0 * HOUR_S);
    for ((_, x), (_, y)) in a.iter().zip(&b) {
        assert_eq!(x.pv(), y.pv());
        assert_eq!(x.op(), y.op());
    }
}

#[test]
fn advancing_in_small_steps_reports_what_one_big_step_does() {
    let mut whole = Plant::new(DAY_S);
    let mut one: Vec<(usize, Reading)> = Vec::new();
    whole.advance_to(3.0 * HOUR_S, &mut |i, r| one.push((i, r)));
    let mut parts = Plant::new(DAY_S);
    let mut many: Vec<(usize, Reading)> = Vec::new();
    let mut t = 0.0;
    while t < 3.0 * HOUR_S {
        t = (t + 37.0f64).min(3.0 * HOUR_S);
        parts.advance_to(t, &mut |i, r| many.push((i, r)));
    }
    one.sort_by(|a, b| (a.0, a.1.time_s).partial_cmp(&(b.0, b.1.time_s)).unwrap());
    many.sort_by(|a, b| (a.0, a.1.time_s).partial_cmp(&(b.0, b.1.time_s)).unwrap());
    assert_eq!(one, many);
}

#[test]
fn the_level_transmitter_is_silent_on_the_first_night_only() {
    let d = loops::buffer_tank_level();
    assert_eq!(pv_dropouts(&d, 7.0 * DAY_S), vec![DROPOUT]);
    assert!(pv_dropouts(&loops::pre_heater(), 7.0 * DAY_S).is_empty());
    let mut plant = Plant::new(2.0 * DAY_S);
    let level = plant
        .defs()
        .iter()
        .position(|d| d.tag == "LIC-150")
        .unwrap();
    let mut silent = Vec::new();
    plant.advance_to(2.0 * DAY_S, &mut |i, r| {
        if i == level && r.pv.is_none() {
            silent.push(r.time_s);
        }
    });
    assert_eq!(silent.first().copied(), Some(DROPOUT.0));
    assert_eq!(silent.last().copied(), Some(DROPOUT.1 - 5.0));
}

#[test]
fn every_value_is_inside_its_physical_range() {
    for (d, s) in record(DAY_S) {
        assert!(
            s.op()
                .iter()
                .all(|&u| (d.op_min()..=d.op_max()).contains(&u)),
            "{}",
            d.tag
        );
        assert!(s.pv().iter().all(|v| v.is_finite()), "{}", d.tag);
    }
}

/// The scenario's intent, judged by the offline analysis on two days of each loop (the
/// demo's test checks the same through the daemon).
#[test]
fn the_analysis_sees_what_each_loop_is_meant_to_show() {
    for (d, report) in analysed(Plant::new(2.0 * DAY_S), 2.0 * DAY_S) {
        let c = report.counts;
        eprintln!(
            "{}: {:?} model {:?} — {}",
            d.tag, c, report.model, report.recommendation.summary
        );
        for e in &report.episodes {
            eprintln!(
                "   {:>7.0} {:>6.1} → {:>6.1} settled {:?} t* {:?} os {:.1} {:?}",
                e.start_s,
                e.sp_from,
                e.sp_to,
                e.settling_time_s.map(|x| x.round()),
                e.min_settling_time_s.map(|x| x.round()),
                e.overshoot_pct,
                e.verdict
            );
        }
        assert!(report.episodes.len() >= 5, "{}: too few episodes", d.tag);
        match d.intent {
            Intent::WellTuned | Intent::FastProcess | Intent::ReverseActing => {
                assert!(
                    c.met > 0 && c.tuning_limited + c.actuator_limited <= c.met / 4,
                    "{}: {c:?}",
                    d.tag
                );
            }
            Intent::SluggishTuning => {
                assert!(
                    c.tuning_limited > 0 && c.met + c.actuator_limited < c.tuning_limited,
                    "{}: {c:?}",
                    d.tag
                );
                assert_eq!(report.recommendation.action, Action::Retune);
            }
            Intent::ActuatorBound => {
                assert!(
                    c.actuator_limited > 0 && c.unreachable > 0,
                    "{}: {c:?}",
                    d.tag
                );
                assert!(c.tuning_limited < c.actuator_limited, "{}: {c:?}", d.tag);
                assert!(matches!(
                    report.recommendation.action,
                    Action::Upgrade | Action::Renegotiate
                ));
                let trial = report
                    .episodes
                    .iter()
                    .find(|e| e.sp_to == TRIAL_STEP.1)
                    .expect("the trial step");
                assert_eq!(trial.verdict, Verdict::Unreachable);
            }
            Intent::StaleSensor => {
                assert!(c.met > 0, "{}: {c:?}", d.tag);
            }
        }
    }
}

/// Where a PI loop on a process of lags and dead time is on the edge of stability, by the
/// Nyquist criterion: the frequency ω where the open loop's phase is −180°, and the controller
/// gain that makes its magnitude 1 there. Returns (that gain, the period 2π/ω). The controller's
/// zero-order hold adds half a step of delay (common practice for sampled control, e.g. Åström &
/// Wittenmark, *Computer-Controlled Systems*; from memory).
fn stability_limit(p: &Process, c: &PiController, step_s: f64) -> (f64, f64) {
    let delay = p.dead_time_s + 0.5 * step_s;
    let lags = [p.time_constant_s, p.second_time_constant_s];
    let phase = |w: f64| {
        -w * delay
            - lags.iter().map(|t| (w * t).atan()).sum::<f64>()
            - (1.0 / (w * c.integral_time_s)).atan()
    };
    // The phase starts near −90° and falls past −180° as ω grows: bisect for the crossing.
    let (mut lo, mut hi) = (1e-5, 10.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if phase(mid) > -std::f64::consts::PI {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let w = lo;
    let per_unit_gain = p.gain.abs() * (1.0 + (w * c.integral_time_s).powi(-2)).sqrt()
        / lags
            .iter()
            .map(|t| (1.0 + (w * t).powi(2)).sqrt())
            .product::<f64>();
    (1.0 / per_unit_gain, 2.0 * std::f64::consts::PI / w)
}

#[test]
fn the_trial_settings_are_beyond_the_pre_heaters_stability_limit() {
    // The numbers the pre-heater's comment gives: proportional-only, the loop cycles at
    // 12.9 %/K with a period of 56 s; with the 50 s integral time at 10.5 %/K and 64 s.
    let d = loops::pre_heater();
    let trial = d.trial.expect("the pre-heater has trial settings");
    let p_only = PiController {
        integral_time_s: 1e12,
        ..trial
    };
    let (ku, pu) = stability_limit(&d.sim.process, &p_only, d.sim.step_s);
    assert!(
        (ku - 12.9).abs() < 0.1 && (pu - 56.0).abs() < 1.0,
        "{ku} {pu}"
    );
    let (limit, period) = stability_limit(&d.sim.process, &trial, d.sim.step_s);
    assert!((limit - 10.5).abs() < 0.1 && (period - 64.0).abs() < 1.0);
    assert!(trial.gain > limit && d.sim.controller.gain < 0.25 * limit);
}

/// The steady-state energy balance of the kettle's dose: with the heater at full power, the PV
/// settles this far below the dosed recipe's setpoint (°C, negative) once all of the load has
/// arrived, and can sag no further.
fn deepest_sag(d: &LoopDef, load: Load) -> f64 {
    let p = d.sim.process;
    let at_full_power = p.bias + p.gain * d.op_max();
    at_full_power + load.size - DOSED_RECIPE_C
}

#[test]
fn the_dose_is_more_than_the_heater_can_counter() {
    // The kettle's comment: a load of −7.7 K where the heater has 3.8 K to spare, so the PV
    // sags by up to 3.9 K.
    let d = loops::cook_kettle();
    let load = d.load.expect("the kettle has a load");
    assert!((load.size + 7.7).abs() < 0.05, "{load:?}");
    assert!((deepest_sag(&d, load) + 3.9).abs() < 0.05);
    assert!((load.lag_s - d.sim.process.time_constant_s).abs() < 1e-9);
}

/// Between its setpoint changes, the offline analysis finds each loop's case and nothing else:
/// the kettle's doses as load disturbances with the heater at its limit, the pre-heater's retune
/// trial as an oscillation of the tuning with the period the loop's model predicts, the feed
/// valve's sticking as an oscillation with the swing of its jumps, and neither an oscillation
/// nor an actuator-limited disturbance anywhere else.
#[test]
fn between_changes_the_analysis_finds_each_loops_case() {
    let span = 2.0 * DAY_S;
    for (d, report) in analysed(Plant::new(span), span) {
        let reg = &report.regulation;
        let osc = &reg.oscillation;
        let limited: Vec<_> = reg
            .disturbances
            .iter()
            .filter(|x| x.verdict == DisturbanceVerdict::ActuatorLimited)
            .collect();
        eprintln!("{}: {osc:?}, actuator-limited {limited:?}", d.tag);
        match d.load {
            Some(load) => {
                let spells = load_spells(&d, span);
                assert_eq!(spells.len(), 2, "one dose a day");
                for (from, to) in spells {
                    let dose = limited
                        .iter()
                        .find(|x| (from..to).contains(&x.start_s))
                        .unwrap_or_else(|| panic!("{}: no disturbance in {from}..{to}", d.tag));
                    // Out of the band by far, and no deeper than the energy balance allows
                    // (noise aside).
                    let peak = dose.peak_deviation;
                    assert!(
                        peak < -1.0 && peak > deepest_sag(&d, load) - 0.1,
                        "{}: {dose:?}",
                        d.tag
                    );
                }
            }
            None => assert!(limited.is_empty(), "{}: {limited:?}", d.tag),
        }
        match (d.trial, d.stiction) {
            (Some(trial), _) => {
                assert!(osc.detected, "{}: {osc:?}", d.tag);
                assert_eq!(osc.likely_cause, Some(Cause::Tuning), "{}: {osc:?}", d.tag);
                let (_, period) = stability_limit(&d.sim.process, &trial, d.sim.step_s);
                let found = osc.period_s.unwrap_or_default();
                assert!(
                    (found / period - 1.0).abs() < 0.15,
                    "{}: period {found} s, the model's {period} s",
                    d.tag
                );
            }
            (None, Some(stiction)) => {
                assert!(osc.detected, "{}: {osc:?}", d.tag);
                // Each slip moves the valve J one way and the next J back: the flow swings
                // K·J peak to peak, an amplitude of K·J/2.
                let swing = 0.5 * d.sim.process.gain * stiction.j_pct;
                let found = osc.amplitude.unwrap_or_default();
                assert!(
                    (found / swing - 1.0).abs() < 0.3,
                    "{}: amplitude {found}, the valve's jumps give {swing}",
                    d.tag
                );
                // Called the valve, from the cycle's shape: retuning does not cure a sticking
                // valve.
                assert_eq!(osc.likely_cause, Some(Cause::Valve), "{}: {osc:?}", d.tag);
            }
            (None, None) => assert!(!osc.detected, "{}: {osc:?}", d.tag),
        }
    }
}

/// The cases between changes stay between changes: without the retune trial, the doses and the
/// sticking valve, every loop's setpoint changes get the same verdicts.
#[test]
fn the_events_between_changes_leave_every_change_verdict_as_it_was() {
    let span = 2.0 * DAY_S;
    let quiet: Vec<LoopDef> = loops()
        .into_iter()
        .map(|d| LoopDef {
            trial: None,
            load: None,
            stiction: None,
            ..d
        })
        .collect();
    let verdicts = |r: &LoopReport| -> Vec<(f64, Verdict)> {
        r.episodes.iter().map(|e| (e.start_s, e.verdict)).collect()
    };
    let with = analysed(Plant::new(span), span);
    let without = analysed(Plant::of(quiet, span), span);
    for ((d, a), (_, b)) in with.iter().zip(&without) {
        assert_eq!(verdicts(a), verdicts(b), "{}", d.tag);
    }
}

/// Over a week, each event between changes falls where the analysis looks for it: after the
/// window of the change before it has closed (ten spec times, the analysis's default horizon),
/// and before the next change by the time the loop takes to calm: an hour for the kettle's PV
/// to recover from a dose, three minutes for the pre-heater back on its own settings and for the
/// feed valve freed (their cycles last a minute or less).
#[test]
fn the_events_between_changes_stay_clear_of_every_changes_window() {
    let week = 7.0 * DAY_S;
    let horizon = |d: &LoopDef| AnalysisOptions::DEFAULT_HORIZON_FACTOR * d.settle_within_s;
    for d in loops() {
        let changes = schedule(&d, week);
        let events: Vec<(f64, f64)> = retune_trials(&d, week)
            .into_iter()
            .chain(load_spells(&d, week))
            .chain(sticky_spells(&d, week))
            .collect();
        for (from, to) in events {
            let before = changes
                .iter()
                .rfind(|c| c.0 <= from)
                .expect("a change before");
            let after = changes
                .iter()
                .find(|c| c.0 >= from)
                .expect("a change after");
            assert!(
                from >= before.0 + horizon(&d),
                "{}: {from} after {before:?}",
                d.tag
            );
            let clear = if d.load.is_some() { HOUR_S } else { 180.0 };
            assert!(to + clear <= after.0, "{}: {to} before {after:?}", d.tag);
        }
    }
}

/// Over a week, the live watch names each of the kettle's cold-water doses once: a disturbance
/// as long as the tracker's buffer, seen again after the buffer dropped its beginning, is the
/// one already reported, not a new one.
#[test]
fn the_live_watch_raises_one_disturbance_per_dose_over_a_week() {
    use crate::analysis::live::{LiveEvent, LoopTracker, RegulationEvent, Row};
    let week = 7.0 * DAY_S;
    let mut plant = Plant::new(week);
    let k = plant
        .defs()
        .iter()
        .position(|d| d.load.is_some())
        .expect("the dosed kettle");
    let def = plant.defs()[k].clone();
    let doses = load_spells(&def, week);
    let mut tracker = LoopTracker::new(setup(&def));
    let mut ids = std::collections::BTreeSet::new();
    let mut rows = Vec::new();
    let mut t = 0.0;
    while t < week {
        t += 600.0;
        rows.clear();
        plant.advance_to(t, &mut |i, r| {
            if let (true, Some(pv)) = (i == k, r.pv) {
                rows.push(Row {
                    time_s: r.time_s,
                    sp: r.sp,
                    pv,
                    op: r.op,
                    auto: true,
                });
            }
        });
        tracker.extend(&rows);
        for e in tracker.evaluate() {
            if let LiveEvent::Regulation(RegulationEvent::ActuatorLimited { id_start_s, .. }) = e {
                ids.insert(id_start_s as i64);
            }
        }
    }
    let ids: Vec<i64> = ids.into_iter().collect();
    // Each dose is named once, by a start inside it or just after it begins.
    for &(from, to) in &doses {
        let named = ids
            .iter()
            .filter(|&&s| (s as f64) >= from && (s as f64) <= to + 600.0)
            .count();
        assert_eq!(named, 1, "dose {from}–{to} s: {ids:?}");
    }
    // At most one more: the trial step above the heater's reach on the first day, which the
    // live buffer sees as a load the heater cannot counter.
    assert!(ids.len() <= doses.len() + 1, "{ids:?} for {doses:?}");
}
