//! Model-free scores of one setpoint response, exactly as the product's definitions state them.
//!
//! For a change of size Δ from `a` to `b` starting at t0:
//! - band: ±`band`·|Δ| around `b`;
//! - settling time: t0 until the last sample outside the band; `None` when the PV is still
//!   outside the band at the end of the window;
//! - overshoot %: the largest excursion beyond `b` in the direction of Δ, as a percentage of |Δ|;
//! - rise time: from 10 % to 90 % of Δ (crossings interpolated linearly between samples);
//! - IAE/|Δ|: ∫|SP − PV| dt over the window divided by |Δ| (seconds);
//! - saturation duty: fraction of samples from t0 until settled (or the window end) whose OP lies
//!   within `saturation_margin` of the OP span from a limit.

pub use super::setup::OpRange;

/// The samples of one episode window: time, setpoint, PV and OP, starting at t0.
#[derive(Debug, Clone, Copy)]
pub struct Response<'a> {
    pub time_s: &'a [f64],
    pub sp: &'a [f64],
    pub pv: &'a [f64],
    pub op: &'a [f64],
}

/// Scores of one response.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StepMetrics {
    pub settling_time_s: Option<f64>,
    /// Index (within the window) of the last sample outside the band, if any.
    pub last_outside: Option<usize>,
    pub overshoot_pct: f64,
    pub rise_time_s: Option<f64>,
    /// Time at which the PV first covered 10 % of the change, if it did.
    pub t10_s: Option<f64>,
    pub iae_per_delta_s: f64,
    pub saturation_duty: f64,
    /// The OP value furthest in the direction the change needed (max for up, min for down).
    pub peak_op: f64,
}

/// Scores a response to a change from `sp_from` to `sp_to`. `op_dir` is the direction the OP must
/// move to make the change (+1 up, −1 down), used for the peak OP. Returns `None` for an empty
/// window or a zero change.
pub fn step_metrics(
    r: Response<'_>,
    sp_from: f64,
    sp_to: f64,
    band_frac: f64,
    op_range: OpRange,
    saturation_margin: f64,
    op_dir: f64,
) -> Option<StepMetrics> {
    let n = r.time_s.len();
    let delta = sp_to - sp_from;
    if n == 0 || delta == 0.0 || !delta.is_finite() {
        return None;
    }
    let t0 = r.time_s[0];
    let dir = delta.signum();
    let mag = delta.abs();
    let band = band_frac * mag;

    let last_outside = r.pv.iter().rposition(|&y| (y - sp_to).abs() > band);
    let settling_time_s = match last_outside {
        None => Some(0.0),
        Some(i) if i + 1 == n => None,
        Some(i) => Some(r.time_s[i] - t0),
    };

    let peak_beyond =
        r.pv.iter()
            .map(|&y| dir * (y - sp_to))
            .fold(0.0_f64, f64::max);
    let overshoot_pct = 100.0 * peak_beyond / mag;

    let t10_s = crossing(r, sp_from + 0.1 * delta, dir);
    let rise_time_s = match (t10_s, crossing(r, sp_from + 0.9 * delta, dir)) {
        (Some(a), Some(b)) => Some((b - a).max(0.0)),
        _ => None,
    };

    let mut iae = 0.0;
    for k in 1..n {
        let e0 = (r.sp[k - 1] - r.pv[k - 1]).abs();
        let e1 = (r.sp[k] - r.pv[k]).abs();
        iae += 0.5 * (e0 + e1) * (r.time_s[k] - r.time_s[k - 1]);
    }

    let until = match last_outside {
        Some(i) => i + 1,
        None => 1,
    };
    let saturated = r.op[..until]
        .iter()
        .filter(|&&u| op_range.is_at_limit(u, saturation_margin))
        .count();

    let peak_op = if op_dir >= 0.0 {
        r.op.iter().copied().fold(f64::NEG_INFINITY, f64::max)
    } else {
        r.op.iter().copied().fold(f64::INFINITY, f64::min)
    };

    Some(StepMetrics {
        settling_time_s,
        last_outside,
        overshoot_pct,
        rise_time_s,
        t10_s,
        iae_per_delta_s: iae / mag,
        saturation_duty: saturated as f64 / until as f64,
        peak_op,
    })
}

/// Time (relative to t0) at which the PV first reaches `level` moving in direction `dir`,
/// interpolated linearly between the two samples around the crossing.
fn crossing(r: Response<'_>, level: f64, dir: f64) -> Option<f64> {
    let t0 = r.time_s[0];
    let k = r.pv.iter().position(|&y| dir * (y - level) >= 0.0)?;
    if k == 0 {
        return Some(0.0);
    }
    let (y0, y1) = (r.pv[k - 1], r.pv[k]);
    let (ta, tb) = (r.time_s[k - 1], r.time_s[k]);
    let frac = if y1 != y0 {
        (level - y0) / (y1 - y0)
    } else {
        1.0
    };
    Some(ta + frac.clamp(0.0, 1.0) * (tb - ta) - t0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn score(t: &[f64], pv: &[f64], from: f64, to: f64) -> StepMetrics {
        let sp = vec![to; t.len()];
        let op = vec![50.0; t.len()];
        score_all(t, &sp, pv, &op, from, to)
    }

    /// Scores a response on a 0–100 OP range with a 2 % band and a 0.5 % saturation margin.
    fn score_all(t: &[f64], sp: &[f64], pv: &[f64], op: &[f64], from: f64, to: f64) -> StepMetrics {
        step_metrics(
            Response {
                time_s: t,
                sp,
                pv,
                op,
            },
            from,
            to,
            0.02,
            OpRange {
                min: 0.0,
                max: 100.0,
            },
            0.005,
            1.0,
        )
        .unwrap()
    }

    fn first_order(tau: f64, dt: f64, dur: f64, from: f64, to: f64) -> (Vec<f64>, Vec<f64>) {
        let n = (dur / dt).round() as usize + 1;
        let t: Vec<f64> = (0..n).map(|k| k as f64 * dt).collect();
        let y = t
            .iter()
            .map(|&s| from + (to - from) * (1.0 - (-s / tau).exp()))
            .collect();
        (t, y)
    }

    #[test]
    fn first_order_settles_into_the_2_percent_band_after_tau_ln_50() {
        // K/(τs+1): settling to a band b takes τ·ln(1/b); 2 % → τ ln 50 = 39.120 s for τ = 10 s
        // (standard first-order result; python-control step_info gives 39.121 on a 1 ms grid).
        let (t, y) = first_order(10.0, 0.001, 80.0, 20.0, 30.0);
        let m = score(&t, &y, 20.0, 30.0);
        assert!((m.settling_time_s.unwrap() - 10.0 * 50f64.ln()).abs() < 0.002);
        // 10–90 % rise of a first-order response is τ ln 9 = 21.972 s.
        assert!((m.rise_time_s.unwrap() - 10.0 * 9f64.ln()).abs() < 0.002);
        assert_eq!(m.overshoot_pct, 0.0);
    }

    #[test]
    fn second_order_overshoot_matches_the_damping_formula() {
        // Underdamped second order: Mp = exp(−ζπ/√(1−ζ²)) (Ogata, Modern Control Engineering,
        // §5-3); ζ = 0.5 → 16.303 %.
        let (zeta, wn) = (0.5f64, 1.0f64);
        let wd = wn * (1.0 - zeta * zeta).sqrt();
        let phi = (1.0 - zeta * zeta).sqrt().atan2(zeta);
        let dt = 5e-4;
        let t: Vec<f64> = (0..40_000).map(|k| k as f64 * dt).collect();
        let y: Vec<f64> = t
            .iter()
            .map(|&s| {
                1.0 - (-zeta * wn * s).exp() / (1.0 - zeta * zeta).sqrt() * (wd * s + phi).sin()
            })
            .collect();
        let m = score(&t, &y, 0.0, 1.0);
        let mp = 100.0 * (-zeta * std::f64::consts::PI / (1.0 - zeta * zeta).sqrt()).exp();
        assert!(
            (m.overshoot_pct - mp).abs() < 1e-3,
            "{} vs {}",
            m.overshoot_pct,
            mp
        );
        // python-control step_info on the same system, dt = 5e-4: settling 8.0765 s (its rule
        // takes the sample after the last one outside; ours the last one outside).
        assert!((m.settling_time_s.unwrap() - 8.0765).abs() < 2.0 * dt);
    }

    #[test]
    fn a_response_still_outside_the_band_at_the_end_never_settled() {
        let (t, y) = first_order(10.0, 1.0, 20.0, 0.0, 1.0);
        assert_eq!(score(&t, &y, 0.0, 1.0).settling_time_s, None);
    }

    #[test]
    fn downward_steps_score_like_upward_ones() {
        let (t, up) = first_order(5.0, 0.1, 60.0, 40.0, 50.0);
        let down: Vec<f64> = up.iter().map(|y| 90.0 - y).collect();
        let a = score(&t, &up, 40.0, 50.0);
        let b = score(&t, &down, 50.0, 40.0);
        assert_eq!(a.settling_time_s, b.settling_time_s);
        assert!((a.rise_time_s.unwrap() - b.rise_time_s.unwrap()).abs() < 1e-9);
    }

    #[test]
    fn saturation_duty_counts_samples_at_a_limit_until_settled() {
        let t: Vec<f64> = (0..10).map(|k| k as f64).collect();
        let pv = vec![0.0, 0.3, 0.6, 0.9, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0];
        let sp = vec![1.0; 10];
        let op = vec![
            100.0, 100.0, 99.8, 60.0, 55.0, 100.0, 50.0, 50.0, 50.0, 50.0,
        ];
        let m = score_all(&t, &sp, &pv, &op, 0.0, 1.0);
        // Last outside is sample 3 (0.9); samples 0..=3 of which 3 are within 0.5 of 100.
        assert_eq!(m.settling_time_s, Some(3.0));
        assert!((m.saturation_duty - 0.75).abs() < 1e-12);
        assert_eq!(m.peak_op, 100.0);
    }

    mod properties {
        use proptest::prelude::*;

        /// A noisy second-order-like response sampled irregularly, from `from` to `to`.
        fn response(
            from: f64,
            to: f64,
            zeta: f64,
            wn: f64,
            jitter: &[f64],
        ) -> (Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>) {
            let mut t = Vec::new();
            let mut s = 0.0;
            for j in jitter {
                t.push(s);
                s += 0.05 + j;
            }
            let wd = wn * (1.0 - zeta * zeta).sqrt();
            let phi = (1.0 - zeta * zeta).sqrt().atan2(zeta);
            let pv: Vec<f64> = t
                .iter()
                .map(|&x| {
                    let unit = 1.0
                        - (-zeta * wn * x).exp() / (1.0 - zeta * zeta).sqrt()
                            * (wd * x + phi).sin();
                    from + (to - from) * unit
                })
                .collect();
            let sp = vec![to; t.len()];
            let op: Vec<f64> = pv.iter().map(|y| 50.0 + (to - y)).collect();
            (t, sp, pv, op)
        }

        fn close(a: Option<f64>, b: Option<f64>, tol: f64) -> bool {
            match (a, b) {
                (Some(x), Some(y)) => (x - y).abs() <= tol * (1.0 + x.abs()),
                (None, None) => true,
                _ => false,
            }
        }

        proptest! {
            #[test]
            fn metrics_do_not_depend_on_where_time_starts(
                shift in -1e6f64..1e6,
                zeta in 0.2f64..1.0,
                jitter in proptest::collection::vec(0.0f64..0.05, 50..400),
            ) {
                let (t, sp, pv, op) = response(20.0, 30.0, zeta, 1.0, &jitter);
                let shifted: Vec<f64> = t.iter().map(|x| x + shift).collect();
                let a = super::score_all(&t, &sp, &pv, &op, 20.0, 30.0);
                let b = super::score_all(&shifted, &sp, &pv, &op, 20.0, 30.0);
                prop_assert!(close(a.settling_time_s, b.settling_time_s, 1e-6));
                prop_assert!(close(a.rise_time_s, b.rise_time_s, 1e-6));
                prop_assert!((a.overshoot_pct - b.overshoot_pct).abs() < 1e-9);
                prop_assert!((a.iae_per_delta_s - b.iae_per_delta_s).abs() < 1e-6 * (1.0 + a.iae_per_delta_s));
            }

            #[test]
            fn metrics_scale_with_the_pv(
                scale in 0.001f64..1000.0,
                offset in -500f64..500.0,
                zeta in 0.2f64..1.0,
                jitter in proptest::collection::vec(0.0f64..0.05, 50..400),
            ) {
                // Percentages and times are unchanged when PV, SP and Δ are scaled together.
                let (t, sp, pv, op) = response(20.0, 30.0, zeta, 1.0, &jitter);
                let map = |v: &[f64]| -> Vec<f64> { v.iter().map(|y| offset + scale * y).collect() };
                let a = super::score_all(&t, &sp, &pv, &op, 20.0, 30.0);
                let b = super::score_all(&t, &map(&sp), &map(&pv), &op, offset + scale * 20.0, offset + scale * 30.0);
                prop_assert!(close(a.settling_time_s, b.settling_time_s, 1e-9));
                prop_assert!(close(a.rise_time_s, b.rise_time_s, 1e-6));
                prop_assert!((a.overshoot_pct - b.overshoot_pct).abs() < 1e-6 * (1.0 + a.overshoot_pct));
                prop_assert!((a.iae_per_delta_s - b.iae_per_delta_s).abs() < 1e-6 * (1.0 + a.iae_per_delta_s));
            }

            #[test]
            fn a_downward_change_scores_like_its_mirror_image(
                zeta in 0.2f64..1.0,
                wn in 0.2f64..3.0,
                jitter in proptest::collection::vec(0.0f64..0.05, 50..400),
            ) {
                let (t, sp, pv, op) = response(20.0, 30.0, zeta, wn, &jitter);
                let mirror = |v: &[f64]| -> Vec<f64> { v.iter().map(|y| 50.0 - y).collect() };
                let a = super::score_all(&t, &sp, &pv, &op, 20.0, 30.0);
                let b = super::score_all(&t, &mirror(&sp), &mirror(&pv), &op, 30.0, 20.0);
                prop_assert!(close(a.settling_time_s, b.settling_time_s, 1e-9));
                prop_assert!(close(a.rise_time_s, b.rise_time_s, 1e-6));
                prop_assert!((a.overshoot_pct - b.overshoot_pct).abs() < 1e-6 * (1.0 + a.overshoot_pct));
            }
        }
    }
}
