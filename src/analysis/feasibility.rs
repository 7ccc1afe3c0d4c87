//! What the actuator allows: the fastest possible settling under the OP limit, whether a new
//! setpoint can be reached at all, and how large the OP limit or the step would have to be.
//!
//! For an FOPDT process at steady state, driving the OP to its limit (headroom h beyond the
//! operating point, in the direction the change needs) gives PV − y0 = K·h·(1 − e^(−(t−θ)/τ)).
//! The fastest entry into a band of ±b·|Δ| around the new setpoint is then (bang-bang principle;
//! a first-order state holds the band afterwards by switching to the steady-state OP):
//!
//!   t* = θ + τ·ln(R / (R − (1−b)·|Δ|)),   R = |K|·h (the reach).
//!
//! If |Δ| > R the setpoint is unreachable: even with the actuator held at its limit the PV cannot
//! settle on it.

use super::identify::Fopdt;
use super::setup::{OpRange, Spec};

/// The fastest possible response to one setpoint change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Reach {
    /// The band can be entered at the earliest `t_star_s` after the change.
    Reachable { t_star_s: f64 },
    /// The change is larger than the actuator's reach: |Δ| > R.
    Unreachable { reach: f64 },
}

/// The direction the OP must move (+1 or −1) for a change `delta` on a process of gain `gain`.
pub fn op_direction(gain: f64, delta: f64) -> f64 {
    if gain * delta >= 0.0 { 1.0 } else { -1.0 }
}

/// The OP headroom from operating point `u0` towards the limit in direction `dir`.
pub fn headroom(u0: f64, dir: f64, op_min: f64, op_max: f64) -> f64 {
    if dir > 0.0 { op_max - u0 } else { u0 - op_min }
}

/// Minimum settling time t* for a change of size `delta` from steady state, with OP headroom `h`
/// (≥ 0) and band fraction `b`.
pub fn min_settling_time(m: &Fopdt, delta: f64, h: f64, b: f64) -> Reach {
    min_settling_time_from(m, delta.abs(), b * delta.abs(), h)
}

/// Minimum settling time t* from the plant's actual state: the PV is `distance` from the new
/// setpoint (≥ 0) and at rest under the operating point whose headroom is `h`; the band's
/// half-width is `band_abs` (PV units). With R = |K|·h, t* = θ + τ·ln(R / (R − (distance −
/// band_abs))); 0 when the PV already lies in the band.
pub fn min_settling_time_from(m: &Fopdt, distance: f64, band_abs: f64, h: f64) -> Reach {
    let reach = m.gain.abs() * h.max(0.0);
    let to_go = distance - band_abs;
    if distance > reach || (to_go > 0.0 && reach <= to_go) {
        return Reach::Unreachable { reach };
    }
    if to_go <= 0.0 {
        return Reach::Reachable { t_star_s: 0.0 };
    }
    let t_star = m.dead_time_s + m.time_constant_s * (reach / (reach - to_go)).ln();
    Reach::Reachable { t_star_s: t_star }
}

/// The OP headroom that would make t* equal `spec_s` for a change `delta` from steady state,
/// never less than what reaching the setpoint at all needs (|Δ|/|K|). `None` when `spec_s` is not
/// longer than the dead time: no actuator can do it.
pub fn required_headroom(m: &Fopdt, delta: f64, b: f64, spec_s: f64) -> Option<f64> {
    required_headroom_from(m, delta.abs(), b * delta.abs(), spec_s)
}

/// [`required_headroom`] from the plant's actual state: the PV `distance` from the new setpoint,
/// a band of half-width `band_abs`.
pub fn required_headroom_from(m: &Fopdt, distance: f64, band_abs: f64, spec_s: f64) -> Option<f64> {
    let avail = spec_s - m.dead_time_s;
    if avail <= 0.0 || m.gain == 0.0 {
        return None;
    }
    let e = (avail / m.time_constant_s).exp();
    let reach = (distance - band_abs).max(0.0) * e / (e - 1.0);
    Some(reach.max(distance) / m.gain.abs())
}

/// The largest change (magnitude) that can meet the spec's time from an operating point with
/// headroom `h`: the change whose t* equals the spec time, capped at the reach. With the band a
/// fraction b of the change, (1 − b)·|Δ| ≤ R·(1 − e^(−(T−θ)/τ)); with an absolute band B,
/// |Δ| − B ≤ R·(1 − e^(−(T−θ)/τ)). `None` when the spec time is not longer than the dead time.
pub fn largest_compliant_step(m: &Fopdt, h: f64, spec: &Spec) -> Option<f64> {
    let avail = spec.settle_within_s - m.dead_time_s;
    if avail <= 0.0 {
        return None;
    }
    let reach = m.gain.abs() * h.max(0.0);
    let moved = reach * (1.0 - (-avail / m.time_constant_s).exp());
    let by_time = match spec.settle_band {
        Some(band) => moved + band,
        None => moved / (1.0 - spec.band_fraction(1.0)),
    };
    Some(by_time.min(reach))
}

/// The needed OP capacity as a multiple of today's, measured from the opposite limit: for a
/// heater on 0–100 % that must reach 140 %, the ratio is 1.4.
pub fn capacity_ratio(required_limit: f64, dir: f64, op: OpRange) -> f64 {
    let (limit, other) = if dir > 0.0 {
        (op.max, op.min)
    } else {
        (op.min, op.max)
    };
    (required_limit - other).abs() / (limit - other).abs()
}

#[cfg(test)]
mod tests {
    use super::*;

    const PLANT: Fopdt = Fopdt {
        gain: 2.0,
        time_constant_s: 10.0,
        dead_time_s: 2.0,
    };

    fn t_star(h: f64, b: f64) -> f64 {
        match min_settling_time(&PLANT, 1.0, h, b) {
            Reach::Reachable { t_star_s } => t_star_s,
            Reach::Unreachable { .. } => f64::INFINITY,
        }
    }

    #[test]
    fn t_star_matches_the_check_table() {
        // Check values for K=2, τ=10, θ=2, Δ=1 computed independently with numpy from the
        // closed form, and for h=0.75 confirmed by a brute-force bang-bang simulation (12.594).
        for (h, b, want) in [
            (0.55, 0.02, 24.1557),
            (0.60, 0.02, 18.9645),
            (0.75, 0.02, 12.5939),
            (1.00, 0.02, 8.7334),
            (1.50, 0.02, 5.9551),
            (0.75, 0.05, 12.0330),
        ] {
            assert!(
                (t_star(h, b) - want).abs() < 1e-3,
                "h={h} b={b}: {}",
                t_star(h, b)
            );
        }
    }

    #[test]
    fn headroom_of_exactly_the_steady_state_move_gives_the_open_loop_settling_time() {
        // h = Δ/K: t* = θ + τ ln(1/b) = 2 + 10 ln 50 = 41.1202 (closed form). Reach equals |Δ|, so
        // the change is just reachable.
        assert!((t_star(0.5, 0.02) - (2.0 + 10.0 * 50f64.ln())).abs() < 1e-9);
    }

    #[test]
    fn a_change_beyond_the_reach_is_unreachable() {
        assert_eq!(
            min_settling_time(&PLANT, 1.0, 0.4, 0.02),
            Reach::Unreachable { reach: 0.8 }
        );
    }

    #[test]
    fn t_star_agrees_with_a_brute_force_simulation_of_the_saturated_input() {
        // Hold the OP at its limit from t = 0 and integrate the process on a 0.1 ms grid; record
        // when the PV enters the band and stays (it is monotone, so entry = settling).
        for h in [0.55, 0.75, 1.5] {
            let (dt, b) = (1e-4, 0.02);
            let mut y = 0.0;
            let mut t = 0.0;
            while (y - 1.0f64).abs() > b {
                let u = if t >= PLANT.dead_time_s { h } else { 0.0 };
                y += dt / PLANT.time_constant_s * (PLANT.gain * u - y);
                t += dt;
            }
            assert!(
                (t - t_star(h, b)).abs() < 2e-3,
                "h={h}: sim {t} vs {}",
                t_star(h, b)
            );
        }
    }

    #[test]
    fn required_headroom_inverts_t_star() {
        let h = required_headroom(&PLANT, 1.0, 0.02, 12.5939).unwrap();
        assert!((h - 0.75).abs() < 1e-4, "{h}");
        assert_eq!(required_headroom(&PLANT, 1.0, 0.02, 2.0), None);
        // A lax spec still needs enough headroom to reach the setpoint at all.
        assert_eq!(required_headroom(&PLANT, 1.0, 0.02, 1e6), Some(0.5));
    }

    #[test]
    fn t_star_from_a_pv_short_of_the_old_setpoint_agrees_with_a_brute_force_simulation() {
        // The PV sits 0.6 below the new setpoint (it never reached the old one), at rest under the
        // operating point; the band is ±0.02 of a change of 1. Hold the OP at its limit from t = 0
        // and integrate on a 0.1 ms grid until the PV enters the band (brute force).
        let (h, band_abs, distance) = (0.75, 0.02, 0.6);
        let (dt, mut y, mut t) = (1e-4, 0.0_f64, 0.0);
        while (y - distance).abs() > band_abs {
            let u = if t >= PLANT.dead_time_s { h } else { 0.0 };
            y += dt / PLANT.time_constant_s * (PLANT.gain * u - y);
            t += dt;
        }
        let Reach::Reachable { t_star_s } = min_settling_time_from(&PLANT, distance, band_abs, h)
        else {
            panic!("reachable");
        };
        assert!((t - t_star_s).abs() < 2e-3, "sim {t} vs {t_star_s}");
        // Already inside the band: nothing to do.
        assert_eq!(
            min_settling_time_from(&PLANT, 0.01, band_abs, h),
            Reach::Reachable { t_star_s: 0.0 }
        );
        // The headroom that makes this t* is found again.
        let need = required_headroom_from(&PLANT, distance, band_abs, t_star_s).unwrap();
        assert!((need - h).abs() < 1e-4, "{need}");
    }

    #[test]
    fn largest_compliant_step_inverts_t_star() {
        let d = largest_compliant_step(&PLANT, 0.75, &Spec::within(12.5939)).unwrap();
        assert!((d - 1.0).abs() < 1e-4, "{d}");
        // With an absolute band of 0.02 the same unit step is the largest (B = 0.02·|Δ| there).
        let spec = Spec {
            settle_band: Some(0.02),
            ..Spec::within(12.5939)
        };
        let d = largest_compliant_step(&PLANT, 0.75, &spec).unwrap();
        assert!((d - 1.0).abs() < 1e-4, "{d}");
        let t = match min_settling_time_from(&PLANT, d, 0.02, 0.75) {
            Reach::Reachable { t_star_s } => t_star_s,
            Reach::Unreachable { .. } => panic!("reachable"),
        };
        assert!((t - 12.5939).abs() < 1e-3, "{t}");
    }

    #[test]
    fn direction_follows_the_sign_of_gain_times_change() {
        assert_eq!(op_direction(2.0, 1.0), 1.0);
        assert_eq!(op_direction(-2.0, 1.0), -1.0);
        assert_eq!(op_direction(-2.0, -1.0), 1.0);
        assert_eq!(headroom(30.0, -1.0, 0.0, 100.0), 30.0);
    }
}
