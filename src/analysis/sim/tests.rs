use super::*;

/// Kc = 0 with a huge τI and no limits to speak of: the OP stays where it is put.
const FREE: PiController = PiController {
    gain: 0.0,
    integral_time_s: 1e9,
    op_min: -1e9,
    op_max: 1e9,
};

fn open_loop(process: Process, step_s: f64) -> LoopSim {
    // Kc = 0 with a huge τI leaves the OP where it starts: an open-loop test.
    LoopSim::new(LoopSimConfig {
        process,
        controller: FREE,
        step_s,
        noise_sd: 0.0,
        seed: 1,
        initial_sp: process.bias,
    })
}

/// A first-order lag, K = 2, τ = 10 s, without dead time or bias; tests vary it.
const LAG: Process = Process {
    gain: 2.0,
    time_constant_s: 10.0,
    second_time_constant_s: 0.0,
    dead_time_s: 0.0,
    bias: 0.0,
};

/// An open loop with its OP stepped from 0 to 1 at time 0.
fn unit_step(process: Process, step_s: f64) -> LoopSim {
    let mut sim = open_loop(process, step_s);
    sim.op = 1.0;
    sim
}

#[test]
fn first_order_reaches_63_percent_after_one_time_constant() {
    // First-order step response y(τ) = 1 − e⁻¹ ≈ 0.632 (standard result for K/(τs+1)).
    let p = Process {
        dead_time_s: 3.0,
        ..LAG
    };
    let mut sim = unit_step(p, 0.01);
    let mut t = 0.0;
    while t < 13.0 - 1e-9 {
        sim.advance(0.0);
        t += 0.01;
    }
    let expected = 2.0 * (1.0 - (-1.0f64).exp());
    assert!((sim.pv_true() - expected).abs() < 1e-3, "{}", sim.pv_true());
}

#[test]
fn two_lags_match_the_closed_form_step_response() {
    // Step response of K/((τ1 s+1)(τ2 s+1)): K[1 − (τ1 e^{−t/τ1} − τ2 e^{−t/τ2})/(τ1 − τ2)].
    let p = Process {
        gain: 1.5,
        time_constant_s: 8.0,
        second_time_constant_s: 3.0,
        bias: 20.0,
        ..LAG
    };
    let mut sim = unit_step(p, 0.05);
    for _ in 0..200 {
        sim.advance(0.0);
    }
    let t = 10.0;
    let y = 1.5 * (1.0 - (8.0 * (-t / 8.0f64).exp() - 3.0 * (-t / 3.0f64).exp()) / 5.0);
    assert!(
        (sim.pv_true() - 20.0 - y).abs() < 1e-6,
        "{} vs {}",
        sim.pv_true() - 20.0,
        y
    );
}

#[test]
fn pi_loop_settles_on_the_setpoint_and_respects_the_actuator_range() {
    let mut sim = saturating_loop();
    let samples = sim.run(&[(1.0, 1.5)], 120.0, 0.5);
    assert!(samples.iter().all(|s| (0.0..=0.9).contains(&s.op)));
    assert!(
        samples.iter().any(|s| s.op == 0.9),
        "the large step must saturate"
    );
    let last = samples.last().unwrap();
    assert!((last.pv - 1.5).abs() < 1e-3, "{}", last.pv);
}

#[test]
fn noise_has_the_requested_spread() {
    let mut rng = Rng::new(42);
    let n = 20_000;
    let xs: Vec<f64> = (0..n).map(|_| rng.normal()).collect();
    let mean = xs.iter().sum::<f64>() / n as f64;
    let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n as f64;
    assert!(
        mean.abs() < 0.03 && (var - 1.0).abs() < 0.05,
        "{mean} {var}"
    );
}

/// An open loop of any family with its OP stepped from `op0` (at rest at `pv0`) to `op1`.
fn open_plant(dynamics: Dynamics, pv0: f64, op1: f64, step_s: f64) -> LoopSim {
    let mut sim = LoopSim::of_plant(PlantSimConfig {
        dynamics,
        controller: FREE,
        step_s,
        noise_sd: 0.0,
        seed: 1,
        initial_sp: pv0,
    });
    sim.op = op1;
    sim
}

fn advance_for(sim: &mut LoopSim, seconds: f64) {
    let n = (seconds / sim.cfg.step_s).round() as usize;
    for _ in 0..n {
        sim.advance_open_loop(sim.op);
    }
}

#[test]
fn lags_through_the_family_constructor_are_the_same_loop() {
    let cfg = LoopSimConfig::jacketed_vessel(70.0, 5);
    let schedule = [(100.0, 62.0), (1500.0, 48.0)];
    let a = LoopSim::new(cfg).run(&schedule, 3000.0, 2.0);
    let b = LoopSim::of_plant(cfg.into()).run(&schedule, 3000.0, 2.0);
    assert_eq!(a, b);
}

const LEVEL: IntegratingProcess = IntegratingProcess {
    gain_per_s: 0.02,
    lag_s: 0.0,
    dead_time_s: 4.0,
    balance_op: 40.0,
};

#[test]
fn an_integrating_level_ramps_at_k_times_the_op_off_balance() {
    // ẏ = k·(u − u_bal): 0.02·(50 − 40) = 0.2 per s, after the 4 s dead time.
    let mut sim = open_plant(Dynamics::Integrating(LEVEL), 30.0, 50.0, 0.1);
    advance_for(&mut sim, 14.0);
    assert!(
        (sim.pv_true() - (30.0 + 0.2 * 10.0)).abs() < 1e-9,
        "{}",
        sim.pv_true()
    );
}

#[test]
fn an_integrating_level_with_a_lag_matches_the_closed_form_ramp() {
    // Step response of k/(s(τs + 1)) to an input step Δu: k·Δu·(t − τ(1 − e^(−t/τ)))
    // (standard result, partial fractions of k/(s²(τs + 1))).
    let p = IntegratingProcess {
        lag_s: 8.0,
        dead_time_s: 0.0,
        ..LEVEL
    };
    let mut sim = open_plant(Dynamics::Integrating(p), 30.0, 45.0, 0.05);
    advance_for(&mut sim, 20.0);
    let t = 20.0;
    let y = 30.0 + 0.02 * 5.0 * (t - 8.0 * (1.0 - (-t / 8.0f64).exp()));
    assert!((sim.pv_true() - y).abs() < 1e-9, "{} vs {y}", sim.pv_true());
}

const HEATER: TwoDirectionProcess = TwoDirectionProcess {
    gain: 0.5,
    rise_time_constant_s: 100.0,
    fall_time_constant_s: 400.0,
    dead_time_s: 10.0,
    bias: 20.0,
};

#[test]
fn a_two_direction_process_rises_and_falls_with_its_own_time_constants() {
    // Each direction is a first-order lag: 1 − e⁻¹ of the way after one time constant.
    let frac = 1.0 - (-1.0f64).exp();
    let mut up = open_plant(Dynamics::TwoDirection(HEATER), 40.0, 60.0, 0.1);
    advance_for(&mut up, 110.0);
    assert!(
        (up.pv_true() - (40.0 + 10.0 * frac)).abs() < 1e-6,
        "{}",
        up.pv_true()
    );
    let mut down = open_plant(Dynamics::TwoDirection(HEATER), 40.0, 20.0, 0.1);
    advance_for(&mut down, 410.0);
    assert!(
        (down.pv_true() - (40.0 - 10.0 * frac)).abs() < 1e-6,
        "{}",
        down.pv_true()
    );
}

const VALVE: ValveProcess = ValveProcess {
    gain: 0.6,
    rangeability: 50.0,
    time_constant_s: 60.0,
    dead_time_s: 5.0,
    bias: 10.0,
};

#[test]
fn an_equal_percentage_valve_gives_equal_flow_ratios_for_equal_op_steps() {
    // The defining property of f(x) = R^(x − 1): each equal OP step multiplies the flow by the
    // same factor (R^0.1 for 10 % of travel), and f(100 %) = 1, f(0) = 1/R.
    for op in [10.0, 35.0, 70.0] {
        let ratio = VALVE.flow_fraction(op + 10.0) / VALVE.flow_fraction(op);
        assert!((ratio - 50f64.powf(0.1)).abs() < 1e-12);
    }
    assert!((VALVE.flow_fraction(100.0) - 1.0).abs() < 1e-12);
    assert!((VALVE.flow_fraction(0.0) - 0.02).abs() < 1e-12);
    // The local gain is the slope of the steady-state curve (central difference).
    let d = Dynamics::Valve(VALVE);
    let slope = (d.steady_pv(60.001).unwrap() - d.steady_pv(59.999).unwrap()) / 0.002;
    assert!((slope - VALVE.local_gain(60.0)).abs() < 1e-6 * slope);
    // The holding OP inverts the curve.
    let pv = d.steady_pv(47.0).unwrap();
    assert!((d.holding_op(pv).unwrap() - 47.0).abs() < 1e-9);
    assert_eq!(d.holding_op(VALVE.bias - 1.0), None);
}

#[test]
fn a_valve_process_settles_on_its_curve_through_one_lag() {
    let d = Dynamics::Valve(VALVE);
    let mut sim = open_plant(d, d.steady_pv(40.0).unwrap(), 60.0, 0.1);
    advance_for(&mut sim, 65.0);
    let (y0, y1) = (d.steady_pv(40.0).unwrap(), d.steady_pv(60.0).unwrap());
    let want = y0 + (y1 - y0) * (1.0 - (-1.0f64).exp());
    assert!(
        (sim.pv_true() - want).abs() < 1e-6,
        "{} vs {want}",
        sim.pv_true()
    );
}

/// Whether the noise-free PV stays in `[lo, hi]` over the next `seconds` with the OP held.
fn stays_by_simulation(sim: &LoopSim, lo: f64, hi: f64, seconds: f64) -> bool {
    let mut s = sim.clone();
    let n = (seconds / s.cfg.step_s).round() as usize;
    (0..n).all(|_| {
        s.advance_open_loop(s.op);
        (lo..=hi).contains(&s.pv_true())
    })
}

#[test]
fn staying_within_a_band_agrees_with_simulating_on_for_every_family() {
    let two_lags = Process {
        gain: 0.8,
        time_constant_s: 50.0,
        second_time_constant_s: 20.0,
        dead_time_s: 6.0,
        bias: 20.0,
    };
    let level = IntegratingProcess {
        lag_s: 15.0,
        ..LEVEL
    };
    let cases = [
        (Dynamics::Lags(two_lags), 60.0, 70.0),
        (Dynamics::Integrating(level), 60.0, 70.0),
        (Dynamics::TwoDirection(HEATER), 40.0, 60.0),
        (Dynamics::Valve(VALVE), 30.0, 50.0),
    ];
    for (d, pv0, op1) in cases {
        // Drive the plant with op1 for a while, then hold the OP that holds the PV where it is
        // heading; ask at every step whether it will stay in a band and check by simulating on.
        let mut sim = open_plant(d, pv0, op1, 0.5);
        advance_for(&mut sim, 30.0);
        let hold = d.holding_op(sim.pv_true() + 1.0).unwrap();
        let target = d.steady_pv(hold).unwrap_or(sim.pv_true() + 1.0);
        let (lo, hi) = (target - 0.5, target + 0.5);
        let (mut said_yes, mut said_no) = (0, 0);
        for _ in 0..400 {
            sim.advance_open_loop(hold);
            let claim = sim.stays_within(lo, hi);
            if claim {
                said_yes += 1;
                assert!(stays_by_simulation(&sim, lo, hi, 2000.0), "{d:?}");
            } else {
                said_no += 1;
            }
        }
        assert!(
            said_no > 0,
            "{d:?}: the dead time alone forbids staying at first"
        );
        if !matches!(d, Dynamics::Integrating(_)) {
            assert!(said_yes > 0, "{d:?}: never settled");
        }
    }
}

#[test]
fn a_watched_run_shows_the_loop_as_it_stands_at_each_change() {
    let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(100.0, 2));
    let mut seen = Vec::new();
    let samples = sim.run_watched(&[(50.0, 55.0), (400.0, 52.0)], 600.0, 2.0, |s, sp| {
        seen.push((s.time_s(), sp, s.op()));
    });
    assert_eq!(seen.len(), 2);
    assert!((seen[0].0 - 50.0).abs() < 1e-9 && seen[0].1 == 55.0);
    assert!((seen[1].0 - 400.0).abs() < 1e-9 && seen[1].1 == 52.0);
    // The OP seen at the change is the one recorded at that time.
    let at = samples
        .iter()
        .find(|x| (x.time_s - 400.0).abs() < 1e-9)
        .unwrap();
    assert_eq!(at.op, seen[1].2);
}

/// K = 2 (from `LAG`), θ = 2 under SIMC's tight PI (Kc 1.25, τI 10) whose OP saturates at 0.9,
/// at rest at 0.5.
fn saturating_loop() -> LoopSim {
    LoopSim::new(LoopSimConfig {
        process: Process {
            dead_time_s: 2.0,
            ..LAG
        },
        controller: PiController {
            gain: 1.25,
            integral_time_s: 10.0,
            op_min: 0.0,
            op_max: 0.9,
        },
        step_s: 0.01,
        noise_sd: 0.0,
        seed: 7,
        initial_sp: 0.5,
    })
}

#[test]
fn both_controller_laws_agree_while_the_output_is_not_clamped() {
    let small = |sim: LoopSim| {
        let mut sim = sim;
        sim.run(&[(1.0, 0.6)], 60.0, 0.5)
    };
    let velocity = small(saturating_loop());
    let clamping = small(saturating_loop().with_clamping_anti_windup());
    assert!(velocity.iter().all(|s| s.op < 0.9));
    for (a, b) in velocity.iter().zip(&clamping) {
        assert!((a.pv - b.pv).abs() < 1e-9 && (a.op - b.op).abs() < 1e-9);
    }
}

#[test]
fn clamping_anti_windup_freezes_the_integral_while_the_error_drives_into_the_clamp() {
    let mut sim = saturating_loop().with_clamping_anti_windup();
    let (mut frozen_steps, mut clamped_steps) = (0, 0);
    for _ in 0..12_000 {
        let before = sim.integral.unwrap();
        sim.advance(1.5);
        let e = 1.5 - sim.pv();
        if sim.op() == 0.9 {
            clamped_steps += 1;
            // Driven further into the clamp: the integral must not move.
            if e > 0.0 && sim.integral.unwrap() == before {
                frozen_steps += 1;
            }
        }
    }
    assert!(clamped_steps > 100, "the large step must saturate");
    assert!(
        frozen_steps + 1 >= clamped_steps,
        "{frozen_steps} of {clamped_steps}"
    );
    assert!((sim.pv_true() - 1.5).abs() < 1e-3, "{}", sim.pv_true());
}

#[test]
fn a_retune_in_service_moves_the_op_only_as_the_new_settings_act() {
    // Mid-response (the SP just raised, an error standing), either form of the controller
    // switched to new settings takes its next step from where the OP stands: the velocity law's
    // increment with the new settings, and no jump (a positional integral left as it was would
    // jump by the gain's change times the last error).
    for positional in [false, true] {
        let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(100.0, 3));
        if positional {
            sim = sim.with_clamping_anti_windup();
        }
        for _ in 0..50 {
            sim.advance(52.0);
        }
        let (before, last_error, error) = (sim.op(), sim.prev_error, 52.0 - sim.pv());
        assert!(last_error.abs() > 0.5, "an error standing: {last_error}");
        let tighter = PiController {
            gain: 12.5,
            ..sim.config().controller
        };
        sim.retune(tighter);
        assert_eq!(sim.config().controller, tighter);
        sim.advance(52.0);
        let h = sim.config().step_s;
        let expected = before
            + tighter.gain * (error - last_error)
            + tighter.gain * h / tighter.integral_time_s * error;
        assert!(
            (sim.op() - expected).abs() < 1e-9,
            "positional {positional}: {} instead of {expected}",
            sim.op()
        );
    }
}
