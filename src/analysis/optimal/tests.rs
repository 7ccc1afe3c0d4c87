use super::search::expm;
use super::*;
use crate::analysis::feasibility::{Reach, min_settling_time};
use crate::analysis::identify::Fopdt;

fn t_star(q: &Question) -> f64 {
    match fastest(q) {
        Fastest::Settles { t_star_s, .. } => t_star_s,
        Fastest::Unreachable => f64::INFINITY,
    }
}

/// Brute force: the earliest settling over a fine uniform grid of (t1, t2), simulated by
/// plain Euler steps — an independent integrator and no refinement.
fn brute_force(q: &Question, t1_max: f64, t2_max: f64, n1: usize, n2: usize) -> f64 {
    let p = &q.plant;
    let u_hold = hold_input(q).expect("reachable");
    let (u_far, u_near) = if needs_positive_input(q) {
        (q.u_hi, q.u_lo)
    } else {
        (q.u_lo, q.u_hi)
    };
    let dt = t1_max / 2000.0;
    let band = q.band_fraction * q.delta.abs();
    let mut best = f64::INFINITY;
    for i in 0..=n1 {
        for j in 0..=n2 {
            let seq = Sequence {
                t1_s: t1_max * i as f64 / n1 as f64,
                t2_s: t2_max * j as f64 / n2 as f64,
                u_far,
                u_near,
                u_hold,
            };
            let end = seq.t1_s + seq.t2_s + 10.0 * p.slowest_s.max(t1_max / 10.0);
            let (last, y_end) = euler(q, &seq, dt, end);
            if (y_end - q.delta).abs() <= band && last < end - p.slowest_s.max(dt) {
                best = best.min(last);
            }
        }
    }
    p.dead_time_s + best
}

/// Plain Euler steps of `dt` of the sequence up to `end`: the last time the output is
/// outside the band (dead time excluded) and the output at the end.
fn euler(q: &Question, seq: &Sequence, dt: f64, end: f64) -> (f64, f64) {
    let p = &q.plant;
    let band = q.band_fraction * q.delta.abs();
    let (mut x, mut t, mut last) = ([0.0; 3], 0.0, 0.0);
    while t < end {
        let u = if t < seq.t1_s {
            seq.u_far
        } else if t < seq.t1_s + seq.t2_s {
            seq.u_near
        } else {
            seq.u_hold
        };
        let mut dx = [0.0; 3];
        for r in 0..p.n {
            dx[r] = (0..p.n).map(|c| p.a[r][c] * x[c]).sum::<f64>() + p.b[r] * u;
        }
        for r in 0..p.n {
            x[r] += dt * dx[r];
        }
        t += dt;
        if (p.output(&x) - q.delta).abs() > band {
            last = t;
        }
    }
    (last, p.output(&x))
}

#[test]
fn first_order_equals_the_closed_form() {
    // K = 2, τ = 10, θ = 2, Δ = 1, b = 0.02: t* for headroom h (shared/REFERENCES.md §5:
    // 0.55 → 24.1557, 0.75 → 12.5939, 1.00 → 8.7334, 1.50 → 5.9551; t* formula, checked
    // there by a bang-bang simulation).
    for (h, expected) in [
        (0.55, 24.1557),
        (0.75, 12.5939),
        (1.0, 8.7334),
        (1.5, 5.9551),
    ] {
        let q = Question {
            plant: Plant::first_order(2.0, 10.0, 2.0),
            delta: 1.0,
            band_fraction: 0.02,
            u_lo: -5.0,
            u_hi: h,
        };
        let got = t_star(&q);
        assert!((got - expected).abs() < 0.01, "h {h}: {got} vs {expected}");
        let closed = match min_settling_time(
            &Fopdt {
                gain: 2.0,
                time_constant_s: 10.0,
                dead_time_s: 2.0,
            },
            1.0,
            h,
            0.02,
        ) {
            Reach::Reachable { t_star_s } => t_star_s,
            Reach::Unreachable { .. } => f64::INFINITY,
        };
        assert!(
            (got - closed).abs() < 0.01,
            "h {h}: {got} vs closed form {closed}"
        );
    }
}

#[test]
fn a_change_beyond_the_reach_is_unreachable() {
    let q = Question {
        plant: Plant::first_order(2.0, 10.0, 2.0),
        delta: 1.0,
        band_fraction: 0.02,
        u_lo: -5.0,
        u_hi: 0.49,
    };
    assert_eq!(fastest(&q), Fastest::Unreachable);
}

#[test]
fn a_negative_gain_process_needs_the_lower_limit() {
    let q = Question {
        plant: Plant::first_order(-2.0, 10.0, 2.0),
        delta: 1.0,
        band_fraction: 0.02,
        u_lo: -0.75,
        u_hi: 5.0,
    };
    assert!((t_star(&q) - 12.5939).abs() < 0.01);
}

#[test]
fn the_double_integrator_meets_the_published_rest_to_rest_time() {
    // ÿ = a·u, |u| ≤ 1, rest to rest over d: one switch at the midpoint,
    // t_min = 2·√(d/a) (Athans & Falb 1966, ch. 7 — from memory). With a band of ±b·d the
    // output may come to rest anywhere in it, and it is settled from the moment it passes
    // the near edge p = (1 − b)·d on the way (derived here): resting at r, it passes p at
    // 2·√(r/a) − √(2(r − p)/a), which falls with r up to r = 2p, so for b < 1/3 the best
    // rest is the far edge (1 + b)·d and t* = 2·√((1 + b)·d/a) − 2·√(b·d/a). As b → 0 this
    // is the published 2·√(d/a).
    for (a, d, b) in [(1.0, 4.0, 0.02), (0.5, 10.0, 0.05), (2.0, 1.0, 1e-6)] {
        let q = Question {
            plant: Plant::double_integrator(a),
            delta: d,
            band_fraction: b,
            u_lo: -1.0,
            u_hi: 1.0,
        };
        let expected = 2.0 * ((1.0 + b) * d / a).sqrt() - 2.0 * (b * d / a).sqrt();
        let got = t_star(&q);
        assert!(
            (got - expected).abs() < 0.005 * expected,
            "a {a} d {d} b {b}: {got} vs {expected}"
        );
    }
    let q = Question {
        plant: Plant::double_integrator(2.0),
        delta: 1.0,
        band_fraction: 1e-6,
        u_lo: -1.0,
        u_hi: 1.0,
    };
    let published = 2.0 * (1.0f64 / 2.0).sqrt();
    assert!((t_star(&q) - published).abs() < 0.005 * published);
}

#[test]
fn a_pure_integrator_with_dead_time_reaches_the_band_edge_at_full_rate() {
    // ẏ = k·u(t − θ): at full input the band edge (1 − b)·Δ is reached after
    // (1 − b)·Δ / (k·h), then the input returns to the balance and the level stays.
    let q = Question {
        plant: Plant::integrating(0.01, None, 5.0),
        delta: 2.0,
        band_fraction: 0.02,
        u_lo: -20.0,
        u_hi: 40.0,
    };
    let expected = 5.0 + 0.98 * 2.0 / (0.01 * 40.0);
    assert!((t_star(&q) - expected).abs() < 0.01 * expected);
}

#[test]
fn second_order_and_integrating_with_lag_match_brute_force() {
    let cases = [
        Question {
            plant: Plant::second_order(1.5, 40.0, 12.0, 5.0),
            delta: 3.0,
            band_fraction: 0.02,
            u_lo: -10.0,
            u_hi: 4.0,
        },
        Question {
            plant: Plant::second_order(1.5, 40.0, 12.0, 5.0),
            delta: -3.0,
            band_fraction: 0.05,
            u_lo: -2.5,
            u_hi: 10.0,
        },
        Question {
            plant: Plant::integrating(0.02, Some(20.0), 3.0),
            delta: 1.0,
            band_fraction: 0.02,
            u_lo: -2.0,
            u_hi: 2.0,
        },
    ];
    for q in cases {
        let Fastest::Settles { t_star_s, sequence } = fastest(&q) else {
            panic!("{q:?} is reachable");
        };
        // What the search reports is real: an independent simulation of its sequence stays
        // in the band from t* on.
        let last_out = last_outside_euler(&q, &sequence);
        assert!(
            last_out <= t_star_s + 0.01 * t_star_s,
            "{q:?}: reported {t_star_s}, the sequence leaves the band at {last_out}"
        );
        // And it is no slower than the best of a uniform brute-force scan.
        let span = 6.0 * q.plant.slowest_s;
        let brute = brute_force(&q, span, span / 2.0, 60, 30);
        assert!(
            t_star_s <= brute * 1.01,
            "{q:?}: search {t_star_s} vs brute force {brute}"
        );
    }
}

/// The last time (dead time included) the output of `seq` is outside the band, by plain
/// Euler steps.
fn last_outside_euler(q: &Question, seq: &Sequence) -> f64 {
    let end = seq.t1_s + seq.t2_s + 20.0 * q.plant.slowest_s.max(1.0);
    q.plant.dead_time_s + euler(q, seq, 1e-3, end).0
}

#[test]
fn the_matrix_exponential_of_a_rotation_is_a_rotation() {
    // e^([[0, −1], [1, 0]]·t) = [[cos t, −sin t], [sin t, cos t]].
    let mut a = [[0.0; 4]; 4];
    a[0][1] = -2.0;
    a[1][0] = 2.0;
    let e = expm(&a, 2);
    assert!((e[0][0] - 2f64.cos()).abs() < 1e-12);
    assert!((e[1][0] - 2f64.sin()).abs() < 1e-12);
}

#[test]
fn two_state_closed_form_matches_the_generic_search_and_brute_force() {
    let mut cases = vec![];
    for plant in [
        Plant::second_order(1.5, 40.0, 12.0, 5.0),
        Plant::second_order(2.0, 10.0, 10.0, 0.0),
        Plant::second_order(1.6, 5.0, 30.0, 2.0),
        Plant::integrating(0.02, Some(20.0), 3.0),
        Plant::integrating(0.5, Some(3.0), 3.0),
    ] {
        for (delta, band_fraction, u_lo, u_hi) in [(1.0, 0.02, -1.0, 1.0), (-1.0, 0.1, -1.0, 0.0)] {
            cases.push(Question {
                plant,
                delta,
                band_fraction,
                u_lo,
                u_hi,
            });
        }
    }
    for q in cases {
        let (
            Fastest::Settles { t_star_s, sequence },
            Fastest::Settles {
                t_star_s: by_search,
                ..
            },
        ) = (fastest(&q), answer(&q, false))
        else {
            panic!("{q:?} is reachable");
        };
        // Never slower than the generic search (which, on a grid, can miss the narrow region
        // where the counter-bang stops the output just inside the far edge: it is then slower).
        assert!(
            t_star_s <= by_search * 1.005,
            "{q:?}: {t_star_s} vs search {by_search}"
        );
        // What it reports is real: plain Euler steps of its sequence stay in the band from t*.
        let end = sequence.t1_s + sequence.t2_s + 20.0 * q.plant.slowest_s;
        let last_out = q.plant.dead_time_s + euler(&q, &sequence, 2e-4, end).0;
        assert!(
            last_out <= t_star_s * 1.001 + 1e-3,
            "{q:?}: {t_star_s} leaves at {last_out}"
        );
        // And no sequence of a uniform (t1, t2) grid, scored by the closed-form trajectory,
        // settles more than 0.5 % sooner.
        let plant = modal::Cascade::of(&q.plant, q.delta, sequence.u_far).expect("two states");
        let inputs = [sequence.u_far, sequence.u_near, sequence.u_hold];
        let (n1, n2) = (150, 60);
        let t1_max = 2.0 * sequence.t1_s.max(sequence.t2_s);
        let mut best = f64::INFINITY;
        for i in 0..=n1 {
            for j in 0..=n2 {
                let (t1, t2) = (t1_max * i as f64 / n1 as f64, t1_max * j as f64 / n2 as f64);
                best = best.min(plant.settling(&q, inputs, t1, t2));
            }
        }
        let brute = q.plant.dead_time_s + best;
        assert!(
            t_star_s <= brute * 1.005,
            "{q:?}: {t_star_s} vs brute force {brute}"
        );
    }
}

#[test]
fn near_repeated_poles_answer_like_repeated_ones() {
    // The divided differences stay exact when the two lags coincide: t* is continuous in τ2.
    let question = |tau2: f64| Question {
        plant: Plant::second_order(1.5, 20.0, tau2, 1.0),
        delta: 2.0,
        band_fraction: 0.02,
        u_lo: -3.0,
        u_hi: 3.0,
    };
    let repeated = t_star(&question(20.0));
    for tau2 in [20.0 * (1.0 + 1e-9), 20.0 * (1.0 - 1e-6), 20.001] {
        let near = t_star(&question(tau2));
        assert!(
            (near - repeated).abs() < 1e-3 * repeated,
            "τ2 {tau2}: {near} vs {repeated}"
        );
    }
    assert!(repeated.is_finite() && repeated > 1.0);
}

#[test]
fn a_change_already_inside_its_band_settles_at_once() {
    for (delta, band_fraction) in [(1.0, 1.5), (-2.0, 1.0), (0.0, 0.02)] {
        let q = Question {
            plant: Plant::second_order(1.5, 40.0, 12.0, 5.0),
            delta,
            band_fraction,
            u_lo: -0.1,
            u_hi: 0.1,
        };
        assert_eq!(t_star(&q), 0.0, "Δ {delta} b {band_fraction}");
    }
}
