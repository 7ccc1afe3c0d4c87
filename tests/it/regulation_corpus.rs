//! Regulation between setpoint changes, measured on a corpus of simulated loops whose truth the
//! simulation knows.
//!
//! Every loop is of our own invention (plant models in `analysis::sim`): three setpoint changes
//! with long holds between them, recorded at 1 s (the controller executes once per sample, as a
//! DCS block recorded at its scan), measurement noise on the PV (0.03–0.08 % of span; 0.01–0.03 %
//! on levels, whose transmitters are commonly damped — common practice). Each record goes
//! through the whole analysis as the product runs it ([`analyze_loop`]: holds, model, dead time
//! and regulation all come from the data), and its findings are judged against the truth:
//! - **sticky valves** — the two-parameter stiction model of Choudhury, Thornhill & Shah (2005,
//!   *Control Eng. Practice* 13) between the PI's output and the process, S 2–8 % and J up to S,
//!   on flow loops (fast first order, J at least a fifth of S: without a slip jump a
//!   self-regulating loop settles) and level loops (integrating, half of them with an inflow
//!   lag; even a pure deadband cycles there): an oscillation with cause `valve`;
//! - **too aggressive** — a PI 5–30 % beyond the stability limit of its first-order-plus-dead-time
//!   process, cycling by itself with the actuator's range bounding the swing: `tuning`;
//! - **external load** — a well-tuned loop (SIMC, Skogestad 2003) with a sinusoidal load whose
//!   period is 25 to 60 dead times, far from the loop's own cycle: `load`;
//! - **healthy** — well-tuned flow, first-order and level loops under random loads (occasional
//!   large random steps, frequent small ones — a filtered random walk — or filtered noise): no
//!   oscillation;
//! - **load steps** on well-tuned loops: some the actuator can counter (`recovered`), some beyond
//!   its range (`actuator_limited`), some cut by a setpoint change while the PV is still out
//!   (`not_recovered`).
//!
//! An oscillating loop belongs to the corpus only when the same loop simulated without
//! measurement noise cycles too (at least 5 cycles at the end of its last hold, of a swing of at
//! least 4σ of the noise); that noise-free run gives the reference period and amplitude, read
//! from its cycles. Drawn loops that do not cycle without noise are drawn again, and counted.
//!
//! The figures, printed with `--nocapture` and asserted: oscillation detected on ≥ 90 % of the
//! oscillating loops; no detection on the healthy ones; cause right on ≥ 80 % of the detected;
//! disturbance verdicts right on ≥ 90 % of the load steps; period and amplitude within
//! tolerance of the noise-free run on ≥ 90 % of the detected (see [`tolerance`]; the errors
//! against the same run's PV before its noise are printed beside them).

pub(crate) mod simulated;

use crate::common::sim as loopsim;
use headroom::analysis::regulation::{Cause, DisturbanceVerdict};
use headroom::analysis::sim::{Dynamics, IntegratingProcess, Rng, Stiction};
use headroom::analysis::{LoopReport, Spec, analyze_loop};
use simulated::{Load, SAMPLE_S, Scenario, cycle_of, fopdt, pick, plant, record, schedule, simc};

/// One corpus loop.
#[derive(Debug, Clone)]
struct Case {
    name: String,
    run: Scenario,
    spec: Spec,
    expect: Expect,
}

#[derive(Debug, Clone, PartialEq)]
enum Expect {
    Oscillation(Cause),
    Quiet,
    /// Load steps `(time, verdict)`.
    Disturbances(Vec<(f64, DisturbanceVerdict)>),
}

/// A flow loop: fast first order, K 0.7–1.5 %/%, τ 4–15 s, θ 1–3 s, PI by SIMC with τc one to
/// four dead times.
fn flow_loop(rng: &mut Rng) -> (Dynamics, (f64, f64), f64) {
    let d = fopdt(
        pick(rng, 0.7, 1.5),
        pick(rng, 4.0, 15.0),
        pick(rng, 1.0, 3.0).round(),
    );
    let theta = d.dead_time_s();
    let tau_c = pick(rng, 1.0, 4.0) * theta;
    (d, simc(&d, tau_c), tau_c + theta)
}

/// A level loop: integrating, k 0.003–0.02 %/s per % of OP, θ 2–8 s, an inflow lag of 0–10 s
/// half the time, PI by SIMC with τc two to six times the effective dead time.
fn level_loop(rng: &mut Rng) -> (Dynamics, (f64, f64), f64) {
    let theta = pick(rng, 2.0, 8.0).round();
    let lag = if rng.uniform() < 0.5 {
        0.0
    } else {
        pick(rng, 2.0, 10.0)
    };
    let d = Dynamics::Integrating(IntegratingProcess {
        gain_per_s: pick(rng, 0.003, 0.02),
        lag_s: lag,
        dead_time_s: theta,
        balance_op: 50.0,
    });
    let tau_c = pick(rng, 2.0, 6.0) * (theta + lag);
    (d, simc(&d, tau_c), tau_c + theta + lag)
}

fn spec(settle_s: f64) -> Spec {
    Spec::within((settle_s / SAMPLE_S).round() * SAMPLE_S)
}

/// A sticky valve on a flow or level loop.
fn sticky(rng: &mut Rng, level: bool, k: usize) -> Case {
    let (dynamics, pi, closed_s) = if level {
        level_loop(rng)
    } else {
        flow_loop(rng)
    };
    let s_pct = pick(rng, 2.0, 8.0);
    // Level loops cycle even with a pure deadband (J = 0); flow loops need a slip jump.
    let j_pct = s_pct
        * if level {
            pick(rng, 0.0, 1.0)
        } else {
            pick(rng, 0.2, 1.0)
        };
    let settle = 8.0 * closed_s;
    let hold = 10.0 * settle + if level { 12_000.0 } else { 3_000.0 };
    let (schedule, duration_s) = schedule(hold, pick(rng, 4.0, 8.0));
    Case {
        name: format!(
            "{}-{k} S {s_pct:.1} % J {j_pct:.1} % Kc {:.2} τI {:.0} s",
            if level { "sticky-level" } else { "sticky-flow" },
            pi.0,
            pi.1
        ),
        // Level transmitters are commonly damped: less noise than on flows (common practice).
        run: Scenario {
            plant: plant(
                dynamics,
                pi,
                if level {
                    pick(rng, 0.01, 0.03)
                } else {
                    pick(rng, 0.03, 0.08)
                },
                rng.next_u64(),
            ),
            stiction: Some(Stiction { s_pct, j_pct }),
            load: Load::None,
            schedule,
            duration_s,
        },
        spec: spec(settle),
        expect: Expect::Oscillation(Cause::Valve),
    }
}

/// A PI 5 to 30 % beyond the stability limit of a first-order-plus-dead-time process, with
/// τI = τ: then L(jω) = Kc·K·e^(−jωθ′)/(jωτ), which crosses −180° at ω = π/(2θ′) with
/// |L| = 1 for Kc = πτ/(2Kθ′) (derived), θ′ = θ plus half a sample for the controller's
/// zero-order hold (Åström & Wittenmark, *Computer-Controlled Systems* — from memory).
fn aggressive(rng: &mut Rng, k: usize) -> Case {
    let (gain, tau, theta) = (
        pick(rng, 0.5, 2.0),
        pick(rng, 10.0, 40.0),
        pick(rng, 2.0, 8.0).round(),
    );
    let ku = std::f64::consts::PI * tau / (2.0 * gain * (theta + SAMPLE_S / 2.0));
    let factor = pick(rng, 1.05, 1.3);
    let settle = 4.0 * (tau + theta);
    let hold = 10.0 * settle + 2_000.0;
    let (schedule, duration_s) = schedule(hold, pick(rng, 4.0, 8.0));
    Case {
        name: format!("aggressive-{k} Kc {factor:.2}·Ku, θ {theta:.0} s, τ {tau:.0} s"),
        run: Scenario {
            plant: plant(
                fopdt(gain, tau, theta),
                (factor * ku, tau),
                pick(rng, 0.03, 0.08),
                rng.next_u64(),
            ),
            stiction: None,
            load: Load::None,
            schedule,
            duration_s,
        },
        spec: spec(settle),
        expect: Expect::Oscillation(Cause::Tuning),
    }
}

/// A well-tuned first-order loop (SIMC, τc one to two dead times).
fn tuned(rng: &mut Rng) -> (Dynamics, (f64, f64), f64) {
    let d = fopdt(
        pick(rng, 0.5, 2.0),
        pick(rng, 10.0, 60.0),
        pick(rng, 2.0, 6.0).round(),
    );
    let theta = d.dead_time_s();
    let tau_c = pick(rng, 1.0, 2.0) * theta;
    (d, simc(&d, tau_c), tau_c + theta)
}

/// A well-tuned loop under a sinusoidal load 25 to 60 dead times long.
fn external(rng: &mut Rng, k: usize) -> Case {
    let (dynamics, pi, closed_s) = tuned(rng);
    let period_s = pick(rng, 25.0, 60.0) * dynamics.dead_time_s();
    let amplitude = pick(rng, 1.0, 3.0);
    let settle = 8.0 * closed_s;
    let hold = 10.0 * settle + 25.0 * period_s;
    let (schedule, duration_s) = schedule(hold, pick(rng, 4.0, 8.0));
    Case {
        name: format!("external-{k} load ±{amplitude:.1} every {period_s:.0} s"),
        run: Scenario {
            plant: plant(dynamics, pi, pick(rng, 0.03, 0.08), rng.next_u64()),
            stiction: None,
            load: Load::Sine {
                amplitude,
                period_s,
            },
            schedule,
            duration_s,
        },
        spec: spec(settle),
        expect: Expect::Oscillation(Cause::Load),
    }
}

/// A well-tuned flow, first-order or level loop under random loads of one of three kinds.
fn healthy(rng: &mut Rng, k: usize) -> Case {
    let (dynamics, pi, closed_s) = match k % 3 {
        0 => flow_loop(rng),
        1 => tuned(rng),
        _ => level_loop(rng),
    };
    let seed = rng.next_u64();
    let lag_s = pick(rng, 0.5, 3.0) * closed_s;
    let load = match (k / 3) % 3 {
        0 => Load::RandomSteps {
            size: pick(rng, 1.0, 3.0),
            mean_interval_s: pick(rng, 5.0, 30.0) * closed_s,
            lag_s,
            seed,
        },
        1 => Load::RandomSteps {
            size: pick(rng, 0.1, 0.3),
            mean_interval_s: pick(rng, 0.3, 1.0) * closed_s,
            lag_s,
            seed,
        },
        _ => Load::FilteredNoise {
            sd: pick(rng, 0.5, 2.0),
            lag_s,
            seed,
        },
    };
    let settle = 8.0 * closed_s;
    let hold = 10.0 * settle + 4_000.0;
    let (schedule, duration_s) = schedule(hold, pick(rng, 4.0, 8.0));
    Case {
        name: format!("healthy-{k} {load:?}"),
        run: Scenario {
            plant: plant(dynamics, pi, pick(rng, 0.03, 0.08), rng.next_u64()),
            stiction: None,
            load,
            schedule,
            duration_s,
        },
        spec: spec(settle),
        expect: Expect::Quiet,
    }
}

/// A well-tuned first-order loop hit by load steps through a lag of the process's time
/// constant (as a load at its input would arrive): in the first hold one the actuator can
/// counter (10 to 25 % of OP) and its removal, in the second one beyond the actuator's range
/// (70 to 110 % of OP from mid-range) removed again later, in the third one a setpoint change
/// cuts while the PV is still out, in the fourth another one the actuator can counter.
fn load_steps(rng: &mut Rng, k: usize) -> Case {
    let (dynamics, pi, closed_s) = tuned(rng);
    let Dynamics::Lags(p) = dynamics else {
        unreachable!("tuned loops are first order")
    };
    let settle = 8.0 * closed_s;
    let busy = 10.0 * settle;
    let gap = 30.0 * closed_s + 300.0;
    let hold = busy + 4.0 * gap;
    let (schedule, duration_s) = schedule(hold, pick(rng, 4.0, 8.0));
    let sign = if rng.uniform() < 0.5 { 1.0 } else { -1.0 };
    // A load (PV units) that needs `op_pct` of OP to counter.
    let size = |op_pct: f64| sign * p.gain * op_pct;
    let (a, big, b, c) = (
        size(pick(rng, 10.0, 25.0)),
        size(pick(rng, 70.0, 110.0)),
        size(pick(rng, 10.0, 25.0)),
        size(pick(rng, 10.0, 25.0)),
    );
    // The PV is still near its peak this long after a load step.
    let cut = p.dead_time_s + 0.5 * closed_s + 10.0;
    let events = [
        (busy + gap, a, DisturbanceVerdict::Recovered),
        (busy + 2.5 * gap, -a, DisturbanceVerdict::Recovered),
        (hold + busy + gap, big, DisturbanceVerdict::ActuatorLimited),
        (3.0 * hold - cut, b, DisturbanceVerdict::NotRecovered),
        (3.0 * hold + busy + gap, -c, DisturbanceVerdict::Recovered),
    ];
    let mut steps: Vec<(f64, f64)> = events.iter().map(|e| (e.0, e.1)).collect();
    // The load beyond the actuator goes away again, inside the same disturbance.
    steps.push((hold + busy + 2.5 * gap, -big));
    Case {
        name: format!(
            "load-steps-{k} K {:.2} τ {:.0} s θ {:.0} s",
            p.gain, p.time_constant_s, p.dead_time_s
        ),
        run: Scenario {
            plant: plant(dynamics, pi, pick(rng, 0.03, 0.08), rng.next_u64()),
            stiction: None,
            load: Load::Steps {
                steps,
                lag_s: p.time_constant_s,
            },
            schedule,
            duration_s,
        },
        spec: spec(settle),
        expect: Expect::Disturbances(events.iter().map(|e| (e.0, e.2)).collect()),
    }
}

/// The disturbance verdicts of a load-steps case, one per load step in order: the verdict of the
/// first disturbance found from the step until the next one (or the end), `None` when none was.
fn verdicts(o: &Outcome) -> Vec<(DisturbanceVerdict, Option<DisturbanceVerdict>)> {
    let Expect::Disturbances(events) = &o.case.expect else {
        return Vec::new();
    };
    events
        .iter()
        .enumerate()
        .map(|(i, (t0, expected))| {
            let until = events.get(i + 1).map_or(f64::INFINITY, |e| e.0);
            let found = o
                .report
                .regulation
                .disturbances
                .iter()
                .find(|d| d.start_s >= *t0 && d.start_s < until)
                .map(|d| d.verdict);
            (*expected, found)
        })
        .collect()
}

/// What the analysis said of one case.
struct Outcome {
    case: Case,
    report: LoopReport,
    /// The noise-free run's period and amplitude, for an oscillating case.
    reference: Option<(f64, f64)>,
    /// The same, read from the noisy run's PV before its measurement noise.
    same_run: Option<(f64, f64)>,
}

fn study(case: Case) -> Outcome {
    let noisy = record(&case.run, true);
    let setup = loopsim::setup("LOOP", &case.run.plant.controller, case.spec);
    let report = analyze_loop(&noisy.series(), &setup);
    let n = noisy.t.len();
    let (reference, same_run) = match case.expect {
        Expect::Oscillation(_) => {
            let clean = record(&case.run, false);
            (
                cycle_of(&clean, n - n / 8, n, 0.0),
                cycle_of(&noisy, n - n / 8, n, 2.0 * case.run.plant.noise_sd),
            )
        }
        _ => (None, None),
    };
    Outcome {
        case,
        report,
        reference,
        same_run,
    }
}

/// Draws `count` oscillating cases from `draw`, keeping those whose noise-free run cycles with a
/// swing of at least 4σ of the noise in the second half of its last hold; returns them with the
/// number drawn again.
fn oscillating(
    count: usize,
    rng: &mut Rng,
    mut draw: impl FnMut(&mut Rng, usize) -> Case,
) -> (Vec<Case>, usize) {
    let (mut kept, mut redrawn) = (Vec::new(), 0);
    while kept.len() < count {
        let case = draw(rng, kept.len());
        let clean = record(&case.run, false);
        let n = clean.t.len();
        match cycle_of(&clean, n - n / 8, n, 0.0) {
            Some((_, amp)) if amp >= 4.0 * case.run.plant.noise_sd => kept.push(case),
            _ => redrawn += 1,
        }
    }
    (kept, redrawn)
}

fn run_all(cases: Vec<Case>) -> Vec<Outcome> {
    let half = cases.len().div_ceil(2);
    let mut cases = cases;
    let second = cases.split_off(half);
    std::thread::scope(|s| {
        let a = s.spawn(move || cases.into_iter().map(study).collect::<Vec<_>>());
        let b = s.spawn(move || second.into_iter().map(study).collect::<Vec<_>>());
        let mut out = a.join().expect("a corpus thread");
        out.extend(b.join().expect("a corpus thread"));
        out
    })
}

fn pct(n: usize, of: usize) -> f64 {
    100.0 * n as f64 / of.max(1) as f64
}

/// The tolerances on period and amplitude against the noise-free run: a sticky valve's cycle
/// itself changes with the noise (the valve sticks on the OP's noise, which lengthens a level
/// loop's cycle by up to about a fifth here), a linear loop's does not.
fn tolerance(expect: &Expect) -> (f64, f64) {
    match expect {
        Expect::Oscillation(Cause::Valve) => (0.25, 0.20),
        _ => (0.05, 0.15),
    }
}

/// The relative errors of the reported period and amplitude against `reference`.
fn errors(o: &Outcome, reference: Option<(f64, f64)>) -> Option<(f64, f64)> {
    let (p, a) = reference?;
    let osc = &o.report.regulation.oscillation;
    Some((osc.period_s? / p - 1.0, osc.amplitude? / a - 1.0))
}

fn median_abs(v: impl Iterator<Item = f64>) -> f64 {
    let mut v: Vec<f64> = v.map(f64::abs).collect();
    v.sort_by(f64::total_cmp);
    v.get(v.len() / 2).copied().unwrap_or(f64::NAN)
}

/// Whether the oscillation's likely cause is the one the loop was built with.
fn cause_is_right(o: &Outcome) -> bool {
    o.report
        .regulation
        .oscillation
        .likely_cause
        .is_some_and(|c| Expect::Oscillation(c) == o.case.expect)
}

/// One line per loop: what was expected and what the analysis found.
fn print_outcome(o: &Outcome) {
    let r = &o.report.regulation;
    if let Expect::Disturbances(_) = o.case.expect {
        let found: Vec<String> = r
            .disturbances
            .iter()
            .map(|d| format!("{:.0} s {}", d.start_s, d.verdict.label()))
            .collect();
        let expected: Vec<String> = verdicts(o)
            .iter()
            .map(|(e, f)| format!("{} → {}", e.label(), f.map_or("none", |v| v.label())))
            .collect();
        eprintln!("  {:<52} {}", o.case.name, expected.join(", "));
        eprintln!("      found: {}", found.join(", "));
        return;
    }
    let osc = &r.oscillation;
    let model = o.report.model.map_or("no model".to_owned(), |m| {
        format!("θ {:.1} s", m.dead_time_s)
    });
    let found = match (osc.detected, osc.period_s, osc.amplitude) {
        (true, Some(p), Some(a)) => format!("{p:.1} s ±{a:.2}, {:?}", osc.likely_cause),
        _ => "none".to_owned(),
    };
    let reference = match (o.reference, o.same_run) {
        (Some((p, a)), Some((p2, a2))) => {
            format!(" | noise-free {p:.1} s ±{a:.2}, same run {p2:.1} s ±{a2:.2}")
        }
        _ => String::new(),
    };
    eprintln!("  {:<52} {found} ({model}){reference}", o.case.name);
    let expected = match o.case.expect {
        Expect::Oscillation(c) => Some(c),
        _ => None,
    };
    if osc.detected && osc.likely_cause != expected {
        eprintln!(
            "      evidence: {}",
            osc.evidence.as_deref().unwrap_or("none")
        );
    }
}

#[test]
fn regulation_findings_match_the_simulated_truth() {
    let mut rng = Rng::new(14);
    let (flow, flow_redrawn) = oscillating(14, &mut rng, |r, k| sticky(r, false, k));
    let (level, level_redrawn) = oscillating(10, &mut rng, |r, k| sticky(r, true, k));
    let (tight, tight_redrawn) = oscillating(8, &mut rng, aggressive);
    let (loads, loads_redrawn) = oscillating(8, &mut rng, external);
    let mut cases: Vec<Case> = [flow, level, tight, loads].concat();
    cases.extend((0..36).map(|k| healthy(&mut rng, k)));
    cases.extend((0..8).map(|k| load_steps(&mut rng, k)));
    let all = run_all(cases);

    eprintln!("regulation corpus ({} loops)", all.len());
    eprintln!(
        "  drawn again because the noise-free run did not cycle: sticky flow {flow_redrawn}, \
         sticky level {level_redrawn}, aggressive {tight_redrawn}, external {loads_redrawn}"
    );
    all.iter().for_each(print_outcome);

    let oscillating: Vec<&Outcome> = all
        .iter()
        .filter(|o| matches!(o.case.expect, Expect::Oscillation(_)))
        .collect();
    let detected: Vec<&Outcome> = oscillating
        .iter()
        .copied()
        .filter(|o| o.report.regulation.oscillation.detected)
        .collect();
    let cause_right = detected.iter().filter(|o| cause_is_right(o)).count();
    let healthy: Vec<&Outcome> = all
        .iter()
        .filter(|o| o.case.expect == Expect::Quiet)
        .collect();
    let false_alarms = healthy
        .iter()
        .filter(|o| o.report.regulation.oscillation.detected)
        .count();
    let within = detected
        .iter()
        .filter(|o| {
            let (tp, ta) = tolerance(&o.case.expect);
            errors(o, o.reference).is_some_and(|(p, a)| p.abs() <= tp && a.abs() <= ta)
        })
        .count();
    let judged: Vec<(DisturbanceVerdict, Option<DisturbanceVerdict>)> =
        all.iter().flat_map(verdicts).collect();
    let verdicts_right = judged.iter().filter(|(e, f)| Some(*e) == *f).count();

    let detection = pct(detected.len(), oscillating.len());
    let cause = pct(cause_right, detected.len());
    let accurate = pct(within, detected.len());
    let disturbances = pct(verdicts_right, judged.len());
    eprintln!(
        "oscillation detected: {}/{} = {detection:.1} % (target ≥ 90 %)",
        detected.len(),
        oscillating.len()
    );
    eprintln!(
        "false detections on healthy loops with random loads: {false_alarms}/{} (target 0)",
        healthy.len()
    );
    eprintln!(
        "cause right: {cause_right}/{} = {cause:.1} % of the detected (target ≥ 80 %)",
        detected.len()
    );
    eprintln!(
        "period and amplitude within tolerance of the noise-free run (valve 25 % / 20 %, \
         others 5 % / 15 %): {within}/{} = {accurate:.1} % (target ≥ 90 %)",
        detected.len()
    );
    for prefix in ["sticky-flow", "sticky-level", "aggressive", "external"] {
        let group: Vec<&Outcome> = oscillating
            .iter()
            .copied()
            .filter(|o| o.case.name.starts_with(prefix))
            .collect();
        let found: Vec<&Outcome> = group
            .iter()
            .copied()
            .filter(|o| o.report.regulation.oscillation.detected)
            .collect();
        let right = found.iter().filter(|o| cause_is_right(o)).count();
        // Median and largest |error| of period and amplitude against a reference.
        let spread = |same: bool| {
            let e: Vec<(f64, f64)> = found
                .iter()
                .filter_map(|o| errors(o, if same { o.same_run } else { o.reference }))
                .collect();
            let largest = |k: fn(&(f64, f64)) -> f64| {
                100.0 * e.iter().map(|x| k(x).abs()).fold(0.0, f64::max)
            };
            format!(
                "period {:.1} % (largest {:.1} %), amplitude {:.1} % (largest {:.1} %)",
                100.0 * median_abs(e.iter().map(|x| x.0)),
                largest(|x| x.0),
                100.0 * median_abs(e.iter().map(|x| x.1)),
                largest(|x| x.1)
            )
        };
        eprintln!(
            "  {prefix}: detected {}/{}, cause right {right}/{}; median |error| against the \
             noise-free run: {}; against the same run's PV before its noise: {}",
            found.len(),
            group.len(),
            found.len(),
            spread(false),
            spread(true)
        );
    }
    eprintln!(
        "disturbance verdicts right: {verdicts_right}/{} = {disturbances:.1} % (target ≥ 90 %)",
        judged.len()
    );

    assert!(
        detection >= 90.0,
        "oscillation detected on {detection:.1} %"
    );
    assert_eq!(false_alarms, 0, "oscillation found on healthy loops");
    assert!(cause >= 80.0, "cause right on {cause:.1} %");
    assert!(
        accurate >= 90.0,
        "period and amplitude within tolerance on {accurate:.1} %"
    );
    assert!(
        disturbances >= 90.0,
        "disturbance verdicts right on {disturbances:.1} %"
    );
}
