//! Accuracy on a simulated corpus with a known truth: verdicts, settling times and identified
//! models, measured against the simulated plant itself.
//!
//! Each corpus loop is a first-order-plus-dead-time process under a PI controller with a
//! saturating actuator, stepped up and down several times. The truth of each episode comes from
//! the noise-free run and the true process: `met` when the noise-free response met the spec,
//! otherwise `unreachable` when |Δ| > |K|·headroom, `actuator_limited` when the true t* exceeds
//! the spec time and `tuning_limited` when it does not. Only episodes whose truth is clear are
//! kept: the noise-free settling time is not within 10 % of the spec time, and a missed episode's
//! t* is below 0.75 or above 1.25 times the spec time. The analysed run adds PV noise.

use crate::common::sim::{series, setup as loop_setup};
use headroom::analysis::feasibility::{self, Reach};
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process, Rng};
use headroom::analysis::{Fopdt, LoopSetup, Series, Spec, Verdict, analyze_loop};

struct CorpusLoop {
    process: Process,
    controller: PiController,
    sample_s: f64,
    initial_sp: f64,
    schedule: Vec<(f64, f64)>,
    duration_s: f64,
    spec: Spec,
}

fn run(l: &CorpusLoop, noise_sd: f64, seed: u64) -> Series {
    let mut sim = LoopSim::new(LoopSimConfig {
        process: l.process,
        controller: l.controller,
        step_s: l.sample_s / 10.0,
        noise_sd,
        seed,
        initial_sp: l.initial_sp,
    });
    series(&sim.run(&l.schedule, l.duration_s, l.sample_s), 0.0)
}

fn setup(l: &CorpusLoop) -> LoopSetup {
    loop_setup("XIC-1", &l.controller, l.spec)
}

fn pick(rng: &mut Rng, lo: f64, hi: f64) -> f64 {
    lo + (hi - lo) * rng.uniform()
}

/// A random loop: process, tuning (tight to sluggish), actuator limit, steps and spec.
fn random_loop(rng: &mut Rng) -> CorpusLoop {
    let tau = pick(rng, 20.0, 400.0);
    let theta = tau * pick(rng, 0.05, 0.4);
    let sign = if rng.uniform() < 0.25 { -1.0 } else { 1.0 };
    let gain = sign * pick(rng, 0.3, 2.5);
    let sample_s = [0.5, 1.0, 2.0, 5.0]
        .into_iter()
        .rfind(|dt| tau / dt >= 15.0 && theta / dt >= 1.0)
        .unwrap_or(0.5);
    // SIMC with τc from tight (= θ) to sluggish (8 θ).
    let tau_c = theta * [1.0, 1.5, 3.0, 6.0, 8.0][(rng.uniform() * 5.0) as usize];
    let kc = tau / (gain * (tau_c + theta));
    let ti = tau.min(4.0 * (tau_c + theta));
    // Operating point 30–50 % OP; the upper limit sometimes cramps the actuator.
    let u0 = pick(rng, 30.0, 50.0);
    let op_max = if rng.uniform() < 0.4 {
        pick(rng, 55.0, 75.0)
    } else {
        100.0
    };
    let op_min = 0.0;
    let sp0 = 50.0;
    let bias = sp0 - gain * u0;
    // Steps sized as a share of the reach in the needed direction, alternating away and back.
    let reach_up = gain.abs() * (op_max - u0);
    let mut schedule = Vec::new();
    let spec_s = (theta + tau * pick(rng, 0.7, 3.0)).round();
    let hold = (spec_s * 4.0).max(8.0 * tau);
    let mut t = hold / 2.0;
    for _ in 0..4 {
        let frac = pick(rng, 0.15, 1.15);
        // "Up" means the direction that needs more OP.
        let away = sp0 + sign * frac * reach_up;
        schedule.push((t.round(), away));
        t += hold;
        schedule.push((t.round(), sp0));
        t += hold;
    }
    CorpusLoop {
        process: Process {
            gain,
            time_constant_s: tau,
            second_time_constant_s: 0.0,
            dead_time_s: theta,
            bias,
        },
        controller: PiController {
            gain: kc,
            integral_time_s: ti,
            op_min,
            op_max,
        },
        sample_s,
        initial_sp: sp0,
        duration_s: t,
        schedule,
        spec: Spec {
            settle_band_pct: 2.0,
            settle_band: None,
            settle_within_s: spec_s,
            max_overshoot_pct: Some(25.0),
            hold_band: None,
            recover_within_s: None,
        },
    }
}

/// The true verdict of each episode of the noise-free run, or `None` when it is not clear-cut.
fn truth(l: &CorpusLoop, clean: &headroom::analysis::LoopReport) -> Vec<Option<Verdict>> {
    let f = Fopdt {
        gain: l.process.gain,
        time_constant_s: l.process.time_constant_s,
        dead_time_s: l.process.dead_time_s,
    };
    let spec = l.spec.settle_within_s;
    clean
        .episodes
        .iter()
        .map(|e| {
            let delta = e.sp_to - e.sp_from;
            let dir = feasibility::op_direction(f.gain, delta);
            // At steady state before each step the true operating point is known exactly.
            let u0 = (e.sp_from - l.process.bias) / f.gain;
            let h = feasibility::headroom(u0, dir, l.controller.op_min, l.controller.op_max);
            let reach = feasibility::min_settling_time(&f, delta, h, 0.02);
            let settled = e.settling_time_s;
            if settled.is_some_and(|ts| (ts - spec).abs() < 0.1 * spec) {
                return None;
            }
            let met = settled.is_some_and(|ts| ts <= spec)
                && e.overshoot_pct <= l.spec.max_overshoot_pct.unwrap_or(f64::INFINITY);
            if met {
                return Some(Verdict::Met);
            }
            match reach {
                Reach::Unreachable { reach } => {
                    // Clear only when well beyond the reach.
                    (delta.abs() > 1.05 * reach).then_some(Verdict::Unreachable)
                }
                Reach::Reachable { t_star_s } if t_star_s > 1.25 * spec => {
                    (delta.abs() < 0.95 * h * f.gain.abs()).then_some(Verdict::ActuatorLimited)
                }
                Reach::Reachable { t_star_s } if t_star_s < 0.75 * spec => {
                    Some(Verdict::TuningLimited)
                }
                Reach::Reachable { .. } => None,
            }
        })
        .collect()
}

#[test]
fn verdicts_settling_times_and_models_are_accurate_on_the_simulated_corpus() {
    let mut rng = Rng::new(2026);
    let (mut scored, mut exact) = (0usize, 0usize);
    let (mut settle_n, mut settle_ok) = (0usize, 0usize);
    let (mut models_n, mut models_ok) = (0usize, 0usize);
    let mut by_truth = std::collections::BTreeMap::<&str, (usize, usize)>::new();
    let mut misses = Vec::new();
    for k in 0..50 {
        let l = random_loop(&mut rng);
        let clean = analyze_loop(&run(&l, 0.0, k), &setup(&l));
        // Noise: 0.2 % of the smallest step in the schedule.
        let smallest = clean
            .episodes
            .iter()
            .map(|e| (e.sp_to - e.sp_from).abs())
            .fold(f64::INFINITY, f64::min);
        let noisy = analyze_loop(&run(&l, 0.002 * smallest, k + 1000), &setup(&l));
        let truths = truth(&l, &clean);

        if let Some(m) = noisy.model {
            models_n += 1;
            let p = l.process;
            let ok = (m.gain - p.gain).abs() <= 0.2 * p.gain.abs()
                && (m.time_constant_s - p.time_constant_s).abs() <= 0.2 * p.time_constant_s
                && (m.dead_time_s - p.dead_time_s).abs()
                    <= (2.0 * l.sample_s).max(0.25 * p.dead_time_s);
            models_ok += usize::from(ok);
            if !ok {
                misses.push(format!("loop {k}: model {m:?} vs true {p:?}"));
            }
        } else {
            misses.push(format!("loop {k}: no model: {:?}", noisy.model_refusal));
        }

        for (i, want) in truths.iter().enumerate() {
            let Some(want) = want else { continue };
            let Some(got) = noisy
                .episodes
                .iter()
                .find(|e| (e.start_s - clean.episodes[i].start_s).abs() <= l.sample_s)
            else {
                misses.push(format!("loop {k} ep {i}: not found in the noisy run"));
                scored += 1;
                continue;
            };
            scored += 1;
            let entry = by_truth.entry(want.as_str()).or_default();
            entry.0 += 1;
            if got.verdict == *want {
                exact += 1;
                entry.1 += 1;
            } else {
                misses.push(format!(
                    "loop {k} ep {i}: want {want:?} got {:?} ({})",
                    got.verdict, got.reason
                ));
            }
            if let (Some(a), Some(b)) = (clean.episodes[i].settling_time_s, got.settling_time_s) {
                settle_n += 1;
                settle_ok += usize::from((a - b).abs() <= (2.0 * l.sample_s).max(0.05 * a));
            }
        }
    }
    let verdict_share = exact as f64 / scored as f64;
    let settle_share = settle_ok as f64 / settle_n as f64;
    let model_share = models_ok as f64 / 50.0;
    eprintln!(
        "corpus: {scored} clear episodes, verdicts exact {exact} ({:.1} %), by truth {by_truth:?}; \
         settling within tolerance {settle_ok}/{settle_n} ({:.1} %); models within tolerance \
         {models_ok}/{models_n} of 50 loops",
        100.0 * verdict_share,
        100.0 * settle_share
    );
    for m in &misses {
        eprintln!("  {m}");
    }
    // Every verdict kind must be represented, or the corpus proves little.
    for v in ["met", "tuning_limited", "actuator_limited", "unreachable"] {
        assert!(
            by_truth.get(v).is_some_and(|c| c.0 >= 10),
            "too few {v}: {by_truth:?}"
        );
    }
    assert!(scored >= 200, "only {scored} clear episodes");
    assert!(
        verdict_share >= 0.95,
        "verdicts exact on {:.1} %",
        100.0 * verdict_share
    );
    assert!(
        settle_share >= 0.95,
        "settling within tolerance on {:.1} %",
        100.0 * settle_share
    );
    assert!(
        model_share >= 0.9,
        "models within tolerance on {:.1} %",
        100.0 * model_share
    );
}
