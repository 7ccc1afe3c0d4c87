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

/// Unit step at t = 10 s sampled every 5 s, and the responses to it of
/// 2·e^(−5.5s)/((40s + 1)(15s + 1)) and 0.004·e^(−3.3s)/(s(20s + 1)) computed by
/// `scipy.signal.step` (scipy 1.17.1) on a 0.1 s grid, shifted by the change time and the dead
/// time:
/// `fine = np.arange(0, 200, 0.1); _, y = signal.step(signal.lti(num, den), T=fine)`,
/// value at t: `y[round((t - 10 - θ)/0.1)]` for t − 10 − θ > 0, else 0.
const SCIPY_SECOND_ORDER: [f64; 40] = [
    0.0,
    0.0,
    0.0,
    0.0,
    0.0294703541,
    0.11347329,
    0.229428704,
    0.361726548,
    0.499951672,
    0.63732077,
    0.769573018,
    0.894184577,
    1.00981403,
    1.11591233,
    1.21244977,
    1.299726,
    1.37823901,
    1.44859555,
    1.51145101,
    1.56746962,
    1.61729916,
    1.66155538,
    1.70081327,
    1.73560292,
    1.76640835,
    1.79366833,
    1.8177784,
    1.8390936,
    1.85793153,
    1.87457552,
    1.88927782,
    1.90226261,
    1.91372884,
    1.92385293,
    1.93279109,
    1.94068165,
    1.94764694,
    1.95379515,
    1.9592219,
    1.96401169,
];
const SCIPY_INTEGRATING_LAG: [f64; 40] = [
    0.0,
    0.0,
    0.0,
    0.000280982752,
    0.00402704691,
    0.0113684689,
    0.0215099585,
    0.0338321429,
    0.047852654,
    0.0631958234,
    0.0795690801,
    0.0967445696,
    0.114544839,
    0.132831686,
    0.151497482,
    0.170458403,
    0.189649167,
    0.209018933,
    0.228528107,
    0.248145851,
    0.26784815,
    0.2876163,
    0.307435735,
    0.327295111,
    0.347185593,
    0.3671003,
    0.387033874,
    0.406982141,
    0.426941852,
    0.446910474,
    0.466886037,
    0.486867006,
    0.506852184,
    0.526840641,
    0.546831651,
    0.56682465,
    0.586819198,
    0.606814951,
    0.626811644,
    0.646809068,
];

#[test]
fn the_second_order_and_integrating_responses_match_scipy() {
    use super::data::Prepared;
    use super::response::Shape;
    let op: Vec<f64> = (0..40).map(|k| if k >= 2 { 1.0 } else { 0.0 }).collect();
    for (pv, shape, gain) in [
        (
            SCIPY_SECOND_ORDER,
            Shape::Second {
                tau1: 40.0,
                tau2: 15.0,
                theta: 5.5,
            },
            2.0,
        ),
        (
            SCIPY_INTEGRATING_LAG,
            Shape::Integrating {
                lag: 20.0,
                theta: 3.3,
            },
            0.004,
        ),
    ] {
        let seg = IdSegment {
            step_s: 5.0,
            op: op.clone(),
            pv: pv.to_vec(),
            pv_rising: true,
        };
        let data = [Prepared::new(&seg)];
        let fit = shape.fit(&data);
        let sst: f64 = shape.stats(&data[0]).sst;
        assert!(
            (fit.gain - gain).abs() < 1e-6 * gain,
            "{shape:?}: {}",
            fit.gain
        );
        // What is left is the rounding of the printed reference values.
        assert!(fit.sse < 1e-12 * sst, "{shape:?}: {} of {sst}", fit.sse);
        // A slightly different shape leaves a clear residual: the check can fail.
        let off = match shape {
            Shape::Second { tau1, tau2, theta } => Shape::Second {
                tau1: tau1 * 1.05,
                tau2,
                theta,
            },
            Shape::Integrating { lag, theta } => Shape::Integrating {
                lag: lag * 1.05,
                theta,
            },
            s => s,
        };
        assert!(off.fit(&data).sse > 1e-7 * sst, "{off:?}");
    }
}

#[test]
fn replicates_are_deterministic_and_spread_around_the_model() {
    let truth = Truth::First {
        k: 1.5,
        tau: 40.0,
        theta: 6.0,
    };
    let segs = episodes(truth, &levels(12, 20.0, 80.0, 3), 300.0, 0.5, 5);
    let s = IdentifySettings::default();
    let m = identify(&segs, 0.5, (0.0, 100.0), None, &s).unwrap();
    let a = replicates(&m, &segs, 0.5, (0.0, 100.0), None, &s, 16, 42);
    let b = replicates(&m, &segs, 0.5, (0.0, 100.0), None, &s, 16, 42);
    let c = replicates(&m, &segs, 0.5, (0.0, 100.0), None, &s, 16, 43);
    assert_eq!(a.len(), 16);
    assert_eq!(a, b);
    assert_ne!(a, c);
    let taus: Vec<f64> = a.iter().map(|r| r.time_constant_s).collect();
    let (lo, hi) = taus
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(l, h), &t| (l.min(t), h.max(t)));
    assert!(lo < hi && lo > 30.0 && hi < 50.0, "{taus:?}");
    assert!(a.iter().all(|r| r.family == Family::FirstOrder));
}

#[test]
fn too_few_episodes_in_one_direction_are_refused_for_two_directions() {
    let truth = Truth::First {
        k: 1.5,
        tau: 40.0,
        theta: 6.0,
    };
    let segs = episodes(truth, &[30.0, 60.0, 40.0], 300.0, 0.1, 5);
    let err = fit_family(
        FamilyKind::TwoDirection,
        &segs,
        0.1,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap_err();
    assert!(
        matches!(
            err,
            Refusal::TooFewEpisodes {
                rising: 1,
                falling: 1,
                ..
            }
        ),
        "{err}"
    );
}

#[test]
fn one_long_level_episode_gives_an_integrating_model_not_a_refusal() {
    // A single change: nothing to hold out, and the first-order time constant is longer than
    // the episode can show, so the integrating family is fitted instead.
    let truth = Truth::Integrating {
        k: 0.004,
        lag: 0.0,
        theta: 4.0,
        u_bal: 50.0,
    };
    let segs = episodes(truth, &[50.0, 60.0], 200.0, 0.02, 5);
    let m = identify(
        &segs[1..],
        0.02,
        (0.0, 100.0),
        None,
        &IdentifySettings::default(),
    )
    .unwrap();
    let Family::Integrating { gain_per_s, .. } = m.family else {
        panic!("{m:?}");
    };
    assert!(near(gain_per_s, 0.004, 0.05), "{m:?}");
}
