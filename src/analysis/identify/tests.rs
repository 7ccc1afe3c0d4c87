use super::*;
use crate::analysis::sim::Rng;

/// Exact samples of an FOPDT driven by a piecewise-constant input (ZOH), K=2, τ=10, θ=3.
fn open_loop_data(noise: f64, seed: u64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let (k, tau, theta, dt) = (2.0, 10.0, 3.0, 0.5);
    let n = 400;
    let mut rng = Rng::new(seed);
    let t: Vec<f64> = (0..n).map(|i| i as f64 * dt).collect();
    let u: Vec<f64> = t
        .iter()
        .map(|&s| {
            if s < 20.0 {
                40.0
            } else if s < 110.0 {
                55.0
            } else {
                47.0
            }
        })
        .collect();
    // Fine-step simulation of the continuous process.
    let fine = 0.001;
    let mut x = k * 40.0;
    let mut y = Vec::with_capacity(n);
    let mut s = 0.0;
    for &ti in &t {
        while s < ti - 1e-12 {
            let ud = if s - theta < 20.0 {
                40.0
            } else if s - theta < 110.0 {
                55.0
            } else {
                47.0
            };
            x += fine / tau * (k * ud - x);
            s += fine;
        }
        y.push(10.0 + x + noise * rng.normal());
    }
    (t, u, y)
}

#[test]
fn recovers_a_known_fopdt_from_noise_free_step_data() {
    let (t, u, y) = open_loop_data(0.0, 1);
    let seg = build_segment(&t, &y, &u, 0.0, 100.0, 400).unwrap();
    let m = identify(
        [&seg],
        0.0,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap();
    assert!((m.gain - 2.0).abs() < 0.01, "{m:?}");
    assert!((m.time_constant_s - 10.0).abs() < 0.1, "{m:?}");
    assert!((m.dead_time_s - 3.0).abs() < 0.1, "{m:?}");
    assert!(m.fit_r2 > 0.999);
}

#[test]
fn noise_on_the_pv_does_not_bias_the_time_constant() {
    let (t, u, y) = open_loop_data(0.5, 9);
    let seg = build_segment(&t, &y, &u, 0.0, 100.0, 400).unwrap();
    let m = identify(
        [&seg],
        0.5,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap();
    assert!((m.gain - 2.0).abs() < 0.1, "{m:?}");
    assert!((m.time_constant_s - 10.0).abs() < 1.5, "{m:?}");
    assert!((m.dead_time_s - 3.0).abs() < 1.0, "{m:?}");
}

#[test]
fn reverse_acting_process_gives_a_negative_gain() {
    let (t, u, y) = open_loop_data(0.0, 1);
    let flipped: Vec<f64> = y.iter().map(|v| 100.0 - v).collect();
    let seg = build_segment(&t, &flipped, &u, 0.0, 100.0, 400).unwrap();
    let m = identify(
        [&seg],
        0.0,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap();
    assert!((m.gain + 2.0).abs() < 0.01, "{m:?}");
}

#[test]
fn thinning_long_episodes_keeps_the_model() {
    let (t, u, y) = open_loop_data(0.0, 1);
    let seg = build_segment(&t, &y, &u, 0.0, 100.0, 100).unwrap();
    assert_eq!(seg.step_s, 199.5 / 100.0);
    let m = identify(
        [&seg],
        0.0,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap();
    assert!((m.time_constant_s - 10.0).abs() < 1.0, "{m:?}");
    assert!((m.dead_time_s - 3.0).abs() < 1.0, "{m:?}");
}

#[test]
fn flat_data_are_refused_as_not_exciting_the_process() {
    let t: Vec<f64> = (0..100).map(f64::from).collect();
    let seg = build_segment(&t, &vec![50.0; 100], &vec![30.0; 100], 0.0, 100.0, 400).unwrap();
    let err = identify(
        [&seg],
        0.1,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap_err();
    assert!(matches!(err, Refusal::NoExcitation { .. }), "{err}");
}

#[test]
fn zoh_discretisation_matches_the_published_check_values() {
    // ZOH FOPDT K=2, τ=10, Ts=1: a = e^(−1/10) = 0.904837, b = K(1−a) = 0.190325
    // (standard zero-order-hold discretisation; values computed independently with numpy).
    let a = (-1.0f64 / 10.0).exp();
    assert!((a - 0.904837).abs() < 1e-6);
    assert!((2.0 * (1.0 - a) - 0.190325).abs() < 1e-6);
}

use super::simulate::{Truth, episodes, levels};

fn chosen(truth: Truth, n: usize, len_s: f64, lo: f64, hi: f64, noise: f64) -> Model {
    let segs = episodes(truth, &levels(n, lo, hi, 7), len_s, noise, 11);
    identify(
        &segs,
        noise,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap_or_else(|e| panic!("{truth:?}: {e}"))
}

fn near(got: f64, want: f64, rel: f64) -> bool {
    (got - want).abs() <= rel * want.abs()
}

#[test]
fn first_order_data_pick_first_order_with_its_parameters() {
    let m = chosen(
        Truth::First {
            k: 1.5,
            tau: 40.0,
            theta: 6.0,
        },
        16,
        300.0,
        20.0,
        80.0,
        0.2,
    );
    assert_eq!(m.family, Family::FirstOrder, "{m:?}");
    assert!(
        near(m.gain, 1.5, 0.03) && near(m.time_constant_s, 40.0, 0.05),
        "{m:?}"
    );
    assert!((m.dead_time_s - 6.0).abs() < 1.0, "{m:?}");
    assert_eq!(m.held_out.iter().count(), 5, "{m:?}");
}

#[test]
fn second_order_data_pick_second_order_with_its_time_constants() {
    let m = chosen(
        Truth::Second {
            k: 2.0,
            tau1: 40.0,
            tau2: 15.0,
            theta: 5.0,
        },
        16,
        300.0,
        30.0,
        70.0,
        0.2,
    );
    let Family::SecondOrder {
        first_time_constant_s: t1,
        second_time_constant_s: t2,
        process_dead_time_s: th,
    } = m.family
    else {
        panic!("{m:?}");
    };
    assert!(
        near(m.gain, 2.0, 0.03) && near(t1, 40.0, 0.15) && near(t2, 15.0, 0.3),
        "{m:?}"
    );
    assert!((th - 5.0).abs() < 2.0, "{m:?}");
    // The first-order equivalent is SIMC's half rule.
    assert!((m.time_constant_s - (t1 + t2 / 2.0)).abs() < 1e-9);
    assert!((m.dead_time_s - (th + t2 / 2.0)).abs() < 1e-9);
}

#[test]
fn integrating_data_pick_integrating_with_its_rate_and_lag() {
    let m = chosen(
        Truth::Integrating {
            k: 0.004,
            lag: 20.0,
            theta: 4.0,
            u_bal: 50.0,
        },
        16,
        200.0,
        35.0,
        65.0,
        0.05,
    );
    let Family::Integrating {
        gain_per_s,
        lag_s,
        process_dead_time_s,
    } = m.family
    else {
        panic!("{m:?}");
    };
    assert!(near(gain_per_s, 0.004, 0.05), "{m:?}");
    assert!(near(lag_s.expect("a lag"), 20.0, 0.3), "{m:?}");
    assert!(process_dead_time_s < 10.0, "{m:?}");
    // First-order equivalent: K/τ is the rate, τ far beyond the episodes.
    assert!(near(m.gain / m.time_constant_s, 0.004, 0.05));
    assert!(m.time_constant_s >= 100.0 * 200.0);
}

#[test]
fn heating_and_passive_cooling_pick_two_directions() {
    let m = chosen(
        Truth::TwoDirection {
            k: 1.5,
            tau_up: 30.0,
            tau_down: 120.0,
            theta: 3.0,
        },
        20,
        500.0,
        20.0,
        80.0,
        0.2,
    );
    let Family::TwoDirection {
        falling_gain,
        falling_time_constant_s,
        ..
    } = m.family
    else {
        panic!("{m:?}");
    };
    assert!(
        near(m.time_constant_s, 30.0, 0.15) && near(falling_time_constant_s, 120.0, 0.15),
        "{m:?}"
    );
    assert!(
        near(m.gain, 1.5, 0.05) && near(falling_gain, 1.5, 0.05),
        "{m:?}"
    );
    assert_eq!(
        m.closed_form(false).map(|f| f.time_constant_s),
        Some(falling_time_constant_s)
    );
}

#[test]
fn an_equal_percentage_valve_picks_an_op_dependent_gain() {
    let m = chosen(
        Truth::Valve {
            k: 1.0,
            tau: 40.0,
            theta: 4.0,
            shape: 3.0,
        },
        20,
        300.0,
        10.0,
        95.0,
        0.2,
    );
    let Family::OpDependentGain {
        valve_shape,
        mapped_gain,
        ..
    } = m.family
    else {
        panic!("{m:?}");
    };
    assert!(
        (valve_shape - 3.0).abs() < 0.5 && near(mapped_gain, 1.0, 0.1),
        "{m:?}"
    );
    assert!(near(m.time_constant_s, 40.0, 0.1), "{m:?}");
    // The local gain at mid-range: K·f'(50) = 3·e^1.5/(e^3 − 1).
    assert!(
        near(m.gain, 3.0 * 1.5f64.exp() / 3.0f64.exp_m1(), 0.12),
        "{m:?}"
    );
}
