use super::*;
use crate::analysis::sim::Rng;

/// A series sampled every `dt` seconds with SP fixed at 50 and the given PV and OP.
fn series(dt: f64, pv: Vec<f64>, op: Vec<f64>) -> Series {
    let n = pv.len();
    Series::new(
        (0..n).map(|i| i as f64 * dt).collect(),
        vec![50.0; n],
        pv,
        op,
        None,
    )
    .unwrap()
}

fn whole(s: &Series, end_reason: HoldEnd) -> Vec<Hold> {
    vec![Hold {
        start: 0,
        end: s.len(),
        end_reason,
        after_change: false,
    }]
}

const SETTINGS: RegulationSettings = RegulationSettings {
    op: OpRange::DEFAULT,
    hold_band: None,
    recover_within_s: None,
    dead_time_s: Some(20.0),
};

fn noise(n: usize, sd: f64, seed: u64) -> Vec<f64> {
    let mut rng = Rng::new(seed);
    (0..n).map(|_| sd * rng.normal()).collect()
}

#[test]
fn the_harris_index_of_an_ar1_disturbance_is_one_minus_phi_to_the_2d() {
    // y_t = φ·y_{t−1} + a_t without control: σ²_y = σ²_a/(1 − φ²), σ²_mv = σ²_a(1 − φ^2d)/
    // (1 − φ²), so η = 1 − φ^(2d) (shared/REFERENCES.md §4, derived there and checked by
    // simulation): φ = 0.9 → d = 1: 0.19, d = 3: 0.468559, d = 5: 0.651322.
    let a = noise(200_000, 1.0, 11);
    let mut y = vec![0.0; a.len()];
    for k in 1..a.len() {
        y[k] = 0.9 * y[k - 1] + a[k];
    }
    for (d, expected) in [(1, 0.19), (3, 0.468559), (5, 0.651322)] {
        let eta = harris_index(std::slice::from_ref(&y), 15, d).unwrap();
        assert!((eta - expected).abs() < 0.01, "d {d}: {eta} vs {expected}");
    }
}

#[test]
fn the_noise_estimate_ignores_slow_movements() {
    // σ = 0.05 on a slow drift of 2 units over the hold: second differences see the noise.
    let n = 5000;
    let e = noise(n, 0.05, 3);
    let pv: Vec<f64> = (0..n)
        .map(|i| 50.0 + 2.0 * (i as f64 / n as f64) + e[i])
        .collect();
    let s = series(1.0, pv, vec![40.0; n]);
    let sd = noise_sd(s.pv(), &whole(&s, HoldEnd::EndOfData)).unwrap();
    assert!((sd - 0.05).abs() < 0.005, "{sd}");
}

/// Two hours at 1 s; a load at 1000 s pushes the PV up by `size` and the loop brings it back
/// with a 60 s time constant; the OP answers, held at `op_during` while the PV is out if
/// given.
fn with_load(size: f64, recovers: bool, op_during: Option<f64>) -> Series {
    let n = 7200;
    let e = noise(n, 0.02, 5);
    let mut pv = Vec::with_capacity(n);
    let mut op = Vec::with_capacity(n);
    for (i, noise) in e.iter().enumerate() {
        let t = i as f64;
        let dev = if t < 1000.0 {
            0.0
        } else if recovers {
            size * (-(t - 1000.0) / 60.0).exp()
        } else {
            size
        };
        pv.push(50.0 + dev + noise);
        let out = dev.abs() > 0.1;
        op.push(match (out, op_during) {
            (true, Some(v)) => v,
            _ => 40.0 - 5.0 * dev,
        });
    }
    series(1.0, pv, op)
}

#[test]
fn a_load_that_the_loop_counters_is_recovered_with_its_peak_and_recovery_time() {
    let s = with_load(1.0, true, None);
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    assert_eq!(r.disturbances.len(), 1, "{:?}", r.disturbances);
    let d = &r.disturbances[0];
    assert_eq!(d.verdict, DisturbanceVerdict::Recovered);
    assert!((d.start_s - 1000.0).abs() <= 1.0);
    assert!((d.peak_deviation - 1.0).abs() < 0.1);
    // Inside the band (4σ = 0.08) for good once 1.0·e^(−t/60) is below the band less the
    // noise: between 60·ln(1/0.12) ≈ 127 s and 60·ln(1/0.04) ≈ 193 s (±2σ of noise).
    let rec = d.recovery_time_s.unwrap();
    assert!((127.0..=193.0).contains(&rec), "{rec}");
    assert!(!r.oscillation.detected);
}

#[test]
fn a_load_met_with_the_op_at_its_limit_is_actuator_limited() {
    let s = with_load(1.0, false, Some(100.0));
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    assert_eq!(r.disturbances.len(), 1);
    assert_eq!(
        r.disturbances[0].verdict,
        DisturbanceVerdict::ActuatorLimited
    );
    assert!(r.disturbances[0].op_at_limit_frac > 0.99);
    assert!(r.time_at_limit_frac.unwrap() > 0.8);
}

#[test]
fn a_recovery_slower_than_the_spec_is_a_miss_of_the_tuning_or_of_the_actuator() {
    // Recovered in 127–193 s with the OP free: a 10 min spec is met, a 1 min one missed by the
    // tuning; held at its limit, the OP could do no more: missed by the actuator.
    let within = |s: f64| RegulationSettings {
        recover_within_s: Some(s),
        ..SETTINGS
    };
    let free = with_load(1.0, true, None);
    let hold = whole(&free, HoldEnd::EndOfData);
    assert_eq!(
        regulation(&free, &hold, &SETTINGS).disturbances[0].missed_spec,
        None
    );
    assert_eq!(
        regulation(&free, &hold, &within(600.0)).disturbances[0].missed_spec,
        None
    );
    assert_eq!(
        regulation(&free, &hold, &within(60.0)).disturbances[0].missed_spec,
        Some(RecoveryLimit::TuningLimited)
    );
    let limited = with_load(1.0, false, Some(100.0));
    let hold = whole(&limited, HoldEnd::EndOfData);
    assert_eq!(
        regulation(&limited, &hold, &within(60.0)).disturbances[0].missed_spec,
        Some(RecoveryLimit::ActuatorLimited)
    );
    // Ended by a gap before it could be judged: no call.
    let hold = whole(&limited, HoldEnd::DataGap);
    let d = &regulation(&limited, &hold, &within(60.0)).disturbances[0];
    assert_eq!(d.verdict, DisturbanceVerdict::ActuatorLimited);
    assert_eq!(d.missed_spec, Some(RecoveryLimit::ActuatorLimited));
}

#[test]
fn a_load_still_out_at_the_end_of_the_hold_is_judged_by_how_the_hold_ended() {
    let s = with_load(1.0, false, None);
    for (end, verdict) in [
        (HoldEnd::SetpointChange, DisturbanceVerdict::NotRecovered),
        (HoldEnd::EndOfData, DisturbanceVerdict::NotRecovered),
        (HoldEnd::DataGap, DisturbanceVerdict::Inconclusive),
        (HoldEnd::ManualMode, DisturbanceVerdict::Inconclusive),
    ] {
        let r = regulation(&s, &whole(&s, end), &SETTINGS);
        assert_eq!(r.disturbances[0].verdict, verdict, "{end:?}");
        assert_eq!(r.disturbances[0].recovery_time_s, None);
    }
}

/// Six hours of a 120 s cycle of amplitude 1 at 1 s; `valve` makes it a sticking valve's
/// shape (the OP ramps as a triangle, the PV jumps as a square wave a quarter cycle later),
/// otherwise the OP mirrors the PV (proportional action on the error).
fn cycling(valve: bool) -> Series {
    let n = 21_600;
    let e = noise(n, 0.02, 9);
    let w = 2.0 * std::f64::consts::PI / 120.0;
    let mut pv = Vec::new();
    let mut op = Vec::new();
    for (i, noise) in e.iter().enumerate() {
        let t = i as f64;
        if valve {
            let phase = (t / 120.0).fract();
            let tri = if phase < 0.5 {
                4.0 * phase - 1.0
            } else {
                3.0 - 4.0 * phase
            };
            op.push(40.0 + 5.0 * tri);
            pv.push(50.0 + (w * t).sin().signum() * 1.0 + noise);
        } else {
            pv.push(50.0 + (w * t).sin() + noise);
            op.push(40.0 - 5.0 * (w * t).sin());
        }
    }
    series(1.0, pv, op)
}

#[test]
fn a_cycling_loop_is_found_with_its_period_amplitude_and_cause() {
    let s = cycling(false);
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    let o = &r.oscillation;
    assert!(o.detected);
    assert!((o.period_s.unwrap() - 120.0).abs() < 6.0, "{o:?}");
    assert!((o.amplitude.unwrap() - 1.0).abs() < 0.1, "{o:?}");
    // 120 s is 6 dead times of 20 s: the loop's own cycle.
    assert_eq!(o.likely_cause, Some(Cause::Tuning), "{o:?}");
    assert!(r.disturbances.is_empty(), "cycles are not disturbances");
    // With a 2 s dead time the same cycle is 60 dead times: it comes from outside.
    let short = RegulationSettings {
        dead_time_s: Some(2.0),
        ..SETTINGS
    };
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &short);
    assert_eq!(r.oscillation.likely_cause, Some(Cause::Load));
    // Without a model no cause is named.
    let none = RegulationSettings {
        dead_time_s: None,
        ..SETTINGS
    };
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &none);
    assert_eq!(r.oscillation.likely_cause, None);
    assert!(
        r.oscillation
            .evidence
            .unwrap()
            .contains("without a process model")
    );
}

#[test]
fn a_sticking_valve_shape_is_called_valve_with_its_evidence() {
    let s = cycling(true);
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    assert!(r.oscillation.detected);
    assert_eq!(
        r.oscillation.likely_cause,
        Some(Cause::Valve),
        "{:?}",
        r.oscillation
    );
    assert!(r.oscillation.evidence.unwrap().contains("odd"));
}

#[test]
fn a_healthy_loop_with_random_loads_does_not_oscillate() {
    for seed in 0..20 {
        let n = 21_600;
        let e = noise(n, 0.02, 100 + seed);
        let bumps = noise(n, 1.0, 200 + seed);
        let mut pv = Vec::new();
        let mut dev = 0.0;
        for i in 0..n {
            // Random loads: a bump now and then, removed by the loop with a 60 s constant.
            if bumps[i] > 3.0 {
                dev += 0.5 * bumps[i].signum();
            }
            dev *= (-1.0f64 / 60.0).exp();
            pv.push(50.0 + dev + e[i]);
        }
        let op: Vec<f64> = pv.iter().map(|p| 40.0 - 5.0 * (p - 50.0)).collect();
        let s = series(1.0, pv, op);
        let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
        assert!(!r.oscillation.detected, "seed {seed}: {:?}", r.oscillation);
    }
}

#[test]
fn op_reversals_count_moves_back_beyond_a_tenth_of_a_percent_only() {
    // A sawtooth between 40 and 60 with a 100 s period (2 reversals per period) plus noise of
    // 0.01 % of span, which must not count; OP travel is 40 per period.
    let n = 3600;
    let e = noise(n, 0.01, 1);
    let op: Vec<f64> = (0..n)
        .map(|i| {
            let ph = (i as f64 / 100.0).fract();
            let tri = if ph < 0.5 { ph * 2.0 } else { 2.0 - ph * 2.0 };
            40.0 + 20.0 * tri + e[i]
        })
        .collect();
    let s = series(1.0, vec![50.0; n], op);
    let (at, travel, rev) = op_figures(&s, &whole(&s, HoldEnd::EndOfData), OpRange::DEFAULT);
    assert_eq!(at, Some(0.0));
    assert!((rev as f64 - 72.0).abs() <= 1.0, "{rev}");
    assert!((travel / 36.0 - 40.0).abs() < 2.0, "{travel}");
}

#[test]
fn the_fast_ar_fit_equals_the_direct_least_squares_sums() {
    // The same index from normal equations summed term by term, on pooled series of uneven
    // length (one shorter than the order, which takes no part in the fit).
    let p = 5;
    let make = |n: usize, seed: u64| {
        let a = noise(n, 1.0, seed);
        let mut y = vec![0.0; n];
        for k in 2..n {
            y[k] = 1.2 * y[k - 1] - 0.4 * y[k - 2] + a[k];
        }
        y
    };
    let pooled = vec![make(300, 1), make(4, 2), make(1200, 3)];
    let d = 4;
    let mut m = [[0.0; MAX_AR_ORDER]; MAX_AR_ORDER];
    let mut r = [0.0; MAX_AR_ORDER];
    for y in &pooled {
        for k in p..y.len() {
            for i in 0..p {
                r[i] += y[k - i - 1] * y[k];
                for j in 0..p {
                    m[i][j] += y[k - i - 1] * y[k - j - 1];
                }
            }
        }
    }
    let a = solve(m, r, p).unwrap();
    let (mut res, mut n_res, mut sum_sq, mut count) = (0.0, 0usize, 0.0, 0usize);
    for y in &pooled {
        for k in p..y.len() {
            let pred: f64 = (0..p).map(|i| a[i] * y[k - i - 1]).sum();
            res += (y[k] - pred).powi(2);
            n_res += 1;
        }
        sum_sq += y.iter().map(|v| v * v).sum::<f64>();
        count += y.len();
    }
    let mut psi = [0.0; 4];
    for k in 0..d {
        psi[k] = if k == 0 {
            1.0
        } else {
            (1..=p.min(k)).map(|i| a[i - 1] * psi[k - i]).sum()
        };
    }
    let direct =
        res / n_res as f64 * psi.iter().map(|v| v * v).sum::<f64>() / (sum_sq / count as f64);
    let fast = harris_index(&pooled, p, d).unwrap();
    assert!((fast - direct).abs() < 1e-9, "{fast} vs {direct}");
}

/// Six hours at 1 s of a 200 s cycle of amplitude 1 with the given shape (a function of the
/// phase in cycles, 0..1, returning −1..1), noise of 0.02; the OP follows `op_of(pv deviation)`.
fn shaped(wave: impl Fn(f64) -> f64, op_of: impl Fn(f64) -> f64) -> Series {
    let n = 21_600;
    let e = noise(n, 0.02, 21);
    let dev: Vec<f64> = (0..n).map(|i| wave((i as f64 / 200.0).fract())).collect();
    let pv = dev.iter().zip(&e).map(|(d, x)| 50.0 + d + x).collect();
    let op = dev.iter().map(|d| op_of(*d)).collect();
    series(1.0, pv, op)
}

fn sine(phase: f64) -> f64 {
    (2.0 * std::f64::consts::PI * phase).sin()
}

fn triangle(phase: f64) -> f64 {
    if phase < 0.5 {
        4.0 * phase - 1.0
    } else {
        3.0 - 4.0 * phase
    }
}

#[test]
fn a_triangular_cycle_with_the_op_off_its_limits_is_called_a_valve() {
    // A level behind a sticking valve ramps between the valve's jumps: a triangle, whose third
    // harmonic is 1/9 of its fundamental (Fourier series); a sine has none.
    let s = shaped(triangle, |d| 40.0 - 5.0 * d);
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    let o = &r.oscillation;
    assert!(o.detected);
    assert!((o.period_s.unwrap() - 200.0).abs() < 2.0, "{o:?}");
    assert!((o.amplitude.unwrap() - 1.0).abs() < 0.1, "{o:?}");
    assert_eq!(o.likely_cause, Some(Cause::Valve), "{o:?}");
    assert!(o.evidence.as_ref().unwrap().contains("0.11"), "{o:?}");
    // The same cycle as a sine is not.
    let s = shaped(sine, |d| 40.0 - 5.0 * d);
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    assert_ne!(r.oscillation.likely_cause, Some(Cause::Valve));
}

#[test]
fn a_cycle_the_clamp_shapes_is_never_a_valve_and_limit_to_limit_is_the_tuning() {
    // A square PV cycle with the OP swinging into both its limits: the loop drives itself
    // across the actuator's range, whatever the model says (here none).
    let square = |phase: f64| if phase < 0.5 { 1.0 } else { -1.0 };
    let s = shaped(square, |d| (50.0 - 80.0 * d).clamp(0.0, 100.0));
    let none = RegulationSettings {
        dead_time_s: None,
        ..SETTINGS
    };
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &none);
    assert_eq!(r.oscillation.likely_cause, Some(Cause::Tuning), "{r:?}");
    assert!(r.oscillation.evidence.unwrap().contains("both its limits"));
    // Clipped at one limit only: not a valve, and without a model no cause.
    let s = shaped(square, |d| (70.0 - 40.0 * d).min(100.0));
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &none);
    assert!(r.oscillation.detected);
    assert_eq!(r.oscillation.likely_cause, None, "{:?}", r.oscillation);
}

#[test]
fn random_loads_through_a_resonant_loop_are_not_an_oscillation() {
    // The PV of a well-damped loop under random loads: second-order filtered noise with a
    // resonance of damping ζ = 0.3 at 100 s, far above the hold band. Its autocorrelation one
    // period on is about e^(−2πζ) ≈ 0.15 (derived), so it does not repeat itself.
    for seed in 0..10 {
        let n = 21_600;
        let (w, zeta) = (2.0 * std::f64::consts::PI / 100.0, 0.3);
        let a = noise(n, 1.0, 300 + seed);
        let e = noise(n, 0.02, 400 + seed);
        // x'' + 2ζω x' + ω² x = ω² a, Euler at 1 s (ω = 0.063, stable and accurate enough).
        let (mut x, mut v) = (0.0, 0.0);
        let pv: Vec<f64> = (0..n)
            .map(|i| {
                let acc = w * w * (a[i] - x) - 2.0 * zeta * w * v;
                v += acc;
                x += v;
                50.0 + x + e[i]
            })
            .collect();
        let op = pv.iter().map(|p| 40.0 - 5.0 * (p - 50.0)).collect();
        let s = series(1.0, pv, op);
        let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
        assert!(!r.oscillation.detected, "seed {seed}: {:?}", r.oscillation);
    }
}

#[test]
fn a_lopsided_cycle_keeps_its_period() {
    // Swings of 3 to one side of SP and 0.6 to the other (an OP clipped on one side, say): each
    // side's hysteresis follows its own peaks, so no cycle is missed, whichever side is larger.
    for side in [1.0, -1.0] {
        let lopsided = |phase: f64| {
            let s = side * sine(phase);
            side * if s > 0.0 { 3.0 * s } else { 0.6 * s }
        };
        let s = shaped(lopsided, |d| 40.0 - 5.0 * d);
        let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
        let o = &r.oscillation;
        assert!(o.detected, "side {side}");
        assert!(
            (o.period_s.unwrap() - 200.0).abs() < 2.0,
            "side {side}: {o:?}"
        );
        assert!(
            (o.amplitude.unwrap() - 1.8).abs() < 0.1,
            "side {side}: {o:?}"
        );
    }
}

/// Three holds of two hours at 1 s, SP 50, 55 and 50, with 10 min of response between them
/// (not holds), and a 120 s cycle of amplitude 1 about SP: on one clock throughout when
/// `one_clock`, else restarted at each change with a third of a cycle more.
fn cycle_across_changes(one_clock: bool) -> (Series, Vec<Hold>) {
    let (hold, gap) = (7200usize, 600usize);
    let n = 3 * hold + 2 * gap;
    let e = noise(n, 0.02, 31);
    let w = 2.0 * std::f64::consts::PI / 120.0;
    let mut sp = Vec::with_capacity(n);
    let mut pv = Vec::with_capacity(n);
    for (i, noise) in e.iter().enumerate() {
        let k = i / (hold + gap);
        let s = if k == 1 { 55.0 } else { 50.0 };
        let since = (i - k * (hold + gap)) as f64;
        let phase = if one_clock {
            w * i as f64
        } else {
            w * since + 2.0 * std::f64::consts::PI * k as f64 / 3.0
        };
        sp.push(s);
        pv.push(s + phase.sin() + noise);
    }
    let op = pv
        .iter()
        .zip(&sp)
        .map(|(p, s)| 40.0 - 5.0 * (p - s))
        .collect();
    let s = Series::new((0..n).map(|i| i as f64).collect(), sp, pv, op, None).unwrap();
    let holds = (0..3)
        .map(|k| Hold {
            start: k * (hold + gap),
            end: k * (hold + gap) + hold,
            end_reason: if k < 2 {
                HoldEnd::SetpointChange
            } else {
                HoldEnd::EndOfData
            },
            after_change: false,
        })
        .collect();
    (s, holds)
}

#[test]
fn a_cycle_that_keeps_its_phase_across_setpoint_changes_is_a_load() {
    // 120 s is 6 dead times of 20 s, where the loop could cycle by itself; but a cycle that runs
    // on through two setpoint changes on the same clock comes from outside the loop.
    let (s, holds) = cycle_across_changes(true);
    let r = regulation(&s, &holds, &SETTINGS);
    assert_eq!(r.oscillation.likely_cause, Some(Cause::Load), "{r:?}");
    assert!(r.oscillation.evidence.unwrap().contains("kept its phase"));
    // Restarted by each change: the loop's own, judged by its period.
    let (s, holds) = cycle_across_changes(false);
    let r = regulation(&s, &holds, &SETTINGS);
    assert_eq!(r.oscillation.likely_cause, Some(Cause::Tuning), "{r:?}");
}

#[test]
fn a_hold_that_starts_outside_the_band_is_the_tail_of_a_response_not_a_load() {
    // The PV comes in from 0.5 above SP with a 60 s time constant (a response settled in a
    // wide spec band, not yet in the narrow hold band), then a real load at 2000 s.
    let n = 4000;
    let e = noise(n, 0.02, 8);
    let pv: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64;
            let tail = 0.5 * (-t / 60.0).exp();
            let load = if t >= 2000.0 {
                -(-(t - 2000.0) / 60.0).exp()
            } else {
                0.0
            };
            50.0 + tail + load + e[i]
        })
        .collect();
    let s = series(1.0, pv, vec![40.0; n]);
    let after = vec![Hold {
        after_change: true,
        ..whole(&s, HoldEnd::EndOfData)[0]
    }];
    let r = regulation(&s, &after, &SETTINGS);
    assert_eq!(r.disturbances.len(), 1, "{:?}", r.disturbances);
    assert!((r.disturbances[0].start_s - 2000.0).abs() <= 2.0);
    // A hold that starts with the data (or a live buffer) has no response before it: what is
    // out at its start is a disturbance.
    let r = regulation(&s, &whole(&s, HoldEnd::EndOfData), &SETTINGS);
    assert_eq!(r.disturbances.len(), 2, "{:?}", r.disturbances);
}
