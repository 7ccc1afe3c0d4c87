//! The bound of one change: where the plant really was when the setpoint moved, the fastest
//! settling the actuator allows from there (t*), and the OP limit a spec-meeting actuator would
//! need — for the identified model and for each of its plausible variants, whose spread is the
//! range the verdict's confidence is read from.
//!
//! **The actual state.** The PV at the change is read from the samples just before it (a straight
//! line through them, evaluated at the change), not taken to be `sp_from`: after an unreachable
//! change the PV sits on its saturated plateau, short of the old setpoint. When that line's slope
//! differs from zero by more than three standard errors the PV was still moving; the OP that
//! would hold it still where it is — the rest input u_r = OP − slope·τ/K of the model's
//! first-order description (for an integrating process, whose description has a long τ and
//! K = k·τ, this is OP − slope/k) — is the operating point the headroom is measured from.

use super::feasibility::{self, Reach};
use super::identify::Model;
use super::optimal::{self, Fastest, Question};
use super::setup::OpRange;

/// Where the plant was at a change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StartState {
    /// PV at the change, read from the samples just before it.
    pub pv: f64,
    /// The PV's rate of change just before the change (PV units per second); 0 unless it differs
    /// from zero by more than three standard errors.
    pub slope_per_s: f64,
}

impl StartState {
    /// Samples before the change read for the start state, at most.
    pub const SAMPLES: usize = 10;

    /// The state at sample `start` read from the samples `[from, start)` (at most
    /// [`Self::SAMPLES`] of them are used); without at least three, the PV at `start` at rest.
    pub fn read(time_s: &[f64], pv: &[f64], from: usize, start: usize) -> StartState {
        let from = from.max(start.saturating_sub(Self::SAMPLES));
        if start < from + 3 {
            return StartState {
                pv: pv[start],
                slope_per_s: 0.0,
            };
        }
        let (t, y) = (&time_s[from..start], &pv[from..start]);
        let n = t.len() as f64;
        let tm = t.iter().sum::<f64>() / n;
        let ym = y.iter().sum::<f64>() / n;
        let stt: f64 = t.iter().map(|v| (v - tm).powi(2)).sum();
        if stt <= 0.0 {
            return StartState {
                pv: ym,
                slope_per_s: 0.0,
            };
        }
        let slope = t
            .iter()
            .zip(y)
            .map(|(a, b)| (a - tm) * (b - ym))
            .sum::<f64>()
            / stt;
        let resid: f64 = t
            .iter()
            .zip(y)
            .map(|(a, b)| (b - ym - slope * (a - tm)).powi(2))
            .sum();
        let se = (resid / (n - 2.0) / stt).sqrt();
        let slope = if slope.abs() > 3.0 * se { slope } else { 0.0 };
        StartState {
            pv: ym + slope * (time_s[start] - tm),
            slope_per_s: slope,
        }
    }

    /// Whether the PV was still moving at the change.
    pub fn moving(&self) -> bool {
        self.slope_per_s != 0.0
    }
}

/// One change as the bound sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Change {
    pub state: StartState,
    pub sp_to: f64,
    /// Half-width of the settling band (PV units).
    pub band_abs: f64,
    /// Mean OP just before the change.
    pub op_start: f64,
}

/// What one model says the actuator allows for one change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bound {
    /// The OP direction the change needs (+1 or −1).
    pub dir: f64,
    /// OP headroom from the rest input towards the limit in that direction.
    pub headroom: f64,
    /// The largest distance the actuator can hold from the rest state (PV units).
    pub reach: f64,
    /// t*; `None` when the new setpoint lies beyond the reach.
    pub fastest_s: Option<f64>,
    /// The OP limit that would make t* equal `spec_s`; `None` when the spec time is not longer
    /// than the dead time.
    pub required_op_limit: Option<f64>,
    /// The OP capacity needed as a multiple of today's.
    pub capacity_ratio: Option<f64>,
}

/// The bound of `model` for change `c`, against a spec time of `spec_s`. Families that are first
/// order in the change's direction use the closed form of DESIGN.md ([`feasibility`]); the others
/// the search of [`optimal`] (in the mapped OP of an OP-dependent gain, where bang–bang in the OP
/// is bang–bang in the mapped OP, since the map is monotone).
pub fn bound(model: &Model, c: &Change, op: OpRange, spec_s: f64) -> Bound {
    let distance = (c.sp_to - c.state.pv).abs();
    let rising = c.sp_to >= c.state.pv;
    let eq = model.fopdt();
    let dir = feasibility::op_direction(eq.gain, c.sp_to - c.state.pv);
    // The OP that would hold the PV still where it is (first-order equivalent; for an integrating
    // process OP − slope/k).
    let rest = if eq.gain != 0.0 {
        c.op_start - c.state.slope_per_s * eq.time_constant_s / eq.gain
    } else {
        c.op_start
    };
    let headroom = feasibility::headroom(rest, dir, op.min, op.max);
    let limit_at = |h: f64| rest + dir * h;
    let (reach, fastest_s, required_op_limit) = match model.closed_form(rising) {
        Some(f) => (
            f.gain.abs() * headroom.max(0.0),
            match feasibility::min_settling_time_from(&f, distance, c.band_abs, headroom) {
                Reach::Reachable { t_star_s } => Some(t_star_s),
                Reach::Unreachable { .. } => None,
            },
            feasibility::required_headroom_from(&f, distance, c.band_abs, spec_s).map(limit_at),
        ),
        None => {
            let search = Search {
                model,
                rising,
                delta: c.sp_to - c.state.pv,
                band_abs: c.band_abs,
                rest,
            };
            let fastest = search.fastest(op.min, op.max);
            let beyond = fastest.is_none_or(|t| t > spec_s);
            (
                search.reach(limit_at(headroom)),
                fastest,
                if beyond {
                    search.required_limit(dir, op, spec_s)
                } else {
                    None
                },
            )
        }
    };
    Bound {
        dir,
        headroom,
        reach,
        fastest_s,
        required_op_limit,
        capacity_ratio: required_op_limit.map(|l| feasibility::capacity_ratio(l, dir, op)),
    }
}

/// The fastest-settling search for one change on a family without a closed form.
struct Search<'a> {
    model: &'a Model,
    rising: bool,
    /// Signed distance to go (PV units).
    delta: f64,
    band_abs: f64,
    /// The OP at rest at the change.
    rest: f64,
}

impl Search<'_> {
    /// t* with the OP between `lo` and `hi`.
    fn fastest(&self, lo: f64, hi: f64) -> Option<f64> {
        if self.delta.abs() <= self.band_abs {
            return Some(0.0);
        }
        let map = self.model.op_map();
        let v_rest = map.apply(self.rest);
        let q = Question {
            plant: self.model.plant(self.rising),
            delta: self.delta,
            band_fraction: self.band_abs / self.delta.abs(),
            u_lo: (map.apply(lo) - v_rest).min(0.0),
            u_hi: (map.apply(hi) - v_rest).max(0.0),
        };
        match optimal::fastest(&q) {
            Fastest::Settles { t_star_s, .. } => Some(t_star_s),
            Fastest::Unreachable => None,
        }
    }

    /// The largest distance the PV can be held at with the OP at `limit` (infinite for an
    /// integrating process).
    fn reach(&self, limit: f64) -> f64 {
        let map = self.model.op_map();
        match self.model.plant(self.rising).static_gain() {
            Some(k) => (k * (map.apply(limit) - map.apply(self.rest))).abs(),
            None => f64::INFINITY,
        }
    }

    /// The OP limit in direction `dir` that makes t* equal `spec_s`, by bisection (t* falls as
    /// the limit moves out); `None` when even ten spans out would not do.
    fn required_limit(&self, dir: f64, op: OpRange, spec_s: f64) -> Option<f64> {
        let with = |limit: f64| {
            let (lo, hi) = if dir > 0.0 {
                (op.min, limit)
            } else {
                (limit, op.max)
            };
            self.fastest(lo, hi).is_some_and(|t| t <= spec_s)
        };
        let (mut near, mut far) = (self.rest, self.rest + dir * 10.0 * op.span());
        if !with(far) {
            return None;
        }
        for _ in 0..REQUIRED_LIMIT_STEPS {
            let mid = 0.5 * (near + far);
            if with(mid) {
                far = mid;
            } else {
                near = mid;
            }
        }
        Some(far)
    }
}

/// Bisection steps for a required OP limit: ten spans halved 24 times is a millionth of a span.
const REQUIRED_LIMIT_STEPS: usize = 24;

/// The spread of a bound over the model's plausible variants.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Spread {
    /// t* from the 10th to the 90th percentile of the variants (with the identified model);
    /// `None` when some plausible variant cannot reach the setpoint at all.
    pub fastest_s: Option<[f64; 2]>,
    /// The reach over the same percentiles.
    pub reach: [f64; 2],
    /// The OP capacity a spec-meeting actuator needs, as a multiple of today's, over the same
    /// percentiles; `None` when some variant gives none.
    pub capacity_ratio: Option<[f64; 2]>,
    /// How many bounds the spread was read from.
    pub count: usize,
}

/// The spread of `point` (the identified model's bound) together with `variants`.
pub fn spread(point: &Bound, variants: &[Bound]) -> Spread {
    let all = || std::iter::once(point).chain(variants);
    let mut reach: Vec<f64> = all().map(|b| b.reach).collect();
    let fastest: Option<Vec<f64>> = all().map(|b| b.fastest_s).collect();
    let capacity: Option<Vec<f64>> = all().map(|b| b.capacity_ratio).collect();
    Spread {
        fastest_s: fastest.map(|mut v| percentile_range(&mut v)),
        capacity_ratio: capacity.map(|mut v| percentile_range(&mut v)),
        reach: percentile_range(&mut reach),
        count: 1 + variants.len(),
    }
}

/// The 10th and 90th percentiles (nearest rank) of `v` (not empty).
fn percentile_range(v: &mut [f64]) -> [f64; 2] {
    v.sort_by(f64::total_cmp);
    let at = |p: f64| v[((p * (v.len() - 1) as f64).round() as usize).min(v.len() - 1)];
    [at(0.1), at(0.9)]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::Fopdt;

    fn model(gain: f64, tau: f64, theta: f64) -> Model {
        let f = Fopdt {
            gain,
            time_constant_s: tau,
            dead_time_s: theta,
        };
        Model::first_order(f, 1.0, 1, 1)
    }

    fn ramp(n: usize, y0: f64, slope: f64) -> (Vec<f64>, Vec<f64>) {
        let t: Vec<f64> = (0..n).map(|i| i as f64).collect();
        let y = t.iter().map(|t| y0 + slope * t).collect();
        (t, y)
    }

    #[test]
    fn the_start_pv_is_where_the_pv_was_not_the_old_setpoint() {
        let (t, y) = ramp(20, 41.0, 0.0);
        let s = StartState::read(&t, &y, 0, 15);
        assert_eq!(s.pv, 41.0);
        assert!(!s.moving());
    }

    #[test]
    fn a_moving_pv_is_extrapolated_to_the_change_and_its_slope_kept() {
        let (t, y) = ramp(20, 10.0, 0.5);
        let s = StartState::read(&t, &y, 0, 15);
        assert!((s.pv - 17.5).abs() < 1e-9, "{s:?}");
        assert!((s.slope_per_s - 0.5).abs() < 1e-12);
    }

    #[test]
    fn noise_alone_does_not_count_as_moving() {
        // Alternating ±0.1 about a constant: no significant slope.
        let t: Vec<f64> = (0..20).map(|i| i as f64).collect();
        let y: Vec<f64> = (0..20)
            .map(|i| if i % 2 == 0 { 5.1 } else { 4.9 })
            .collect();
        assert!(!StartState::read(&t, &y, 0, 16).moving());
    }

    #[test]
    fn after_a_saturated_plateau_t_star_covers_only_the_distance_still_to_go() {
        // K = 0.8, τ = 300 s, θ = 30 s; OP at 100 % on a plateau of 68 (an earlier change to 75
        // was beyond reach). The next change, 75 → 60, starts from 68, not from 75, with the whole
        // OP range below as headroom. Closed form: R = 0.8·100 = 80, to go = 8 − 0.3 = 7.7,
        // t* = 30 + 300·ln(80/72.3) (hand computation of the closed form of DESIGN.md).
        let m = model(0.8, 300.0, 30.0);
        let c = Change {
            state: StartState {
                pv: 68.0,
                slope_per_s: 0.0,
            },
            sp_to: 60.0,
            band_abs: 0.3,
            op_start: 100.0,
        };
        let b = bound(&m, &c, OpRange::DEFAULT, 600.0);
        let want = 30.0 + 300.0 * (80.0_f64 / 72.3).ln();
        assert!((b.fastest_s.unwrap() - want).abs() < 1e-9, "{b:?}");
        assert_eq!(b.dir, -1.0);
    }

    #[test]
    fn a_pv_still_rising_needs_less_headroom_to_go_on_rising() {
        // Rising at 0.1 /s under OP 50 on K = 2, τ = 100: the OP that would hold it still is
        // 50 − 0.1·100/2 = 45, so the headroom upwards is 55, not 50.
        let m = model(2.0, 100.0, 5.0);
        let c = Change {
            state: StartState {
                pv: 100.0,
                slope_per_s: 0.1,
            },
            sp_to: 110.0,
            band_abs: 0.2,
            op_start: 50.0,
        };
        let b = bound(&m, &c, OpRange::DEFAULT, 600.0);
        assert!((b.headroom - 55.0).abs() < 1e-9, "{b:?}");
    }

    #[test]
    fn the_spread_reads_percentiles_and_an_unreachable_variant_leaves_no_t_star_range() {
        let b = |t: Option<f64>, reach: f64| Bound {
            dir: 1.0,
            headroom: 1.0,
            reach,
            fastest_s: t,
            required_op_limit: None,
            capacity_ratio: None,
        };
        let variants: Vec<Bound> = (1..=10).map(|i| b(Some(100.0 + i as f64), 10.0)).collect();
        let s = spread(&b(Some(100.0), 10.0), &variants);
        assert_eq!(s.fastest_s, Some([101.0, 109.0]));
        assert_eq!(s.count, 11);
        let mut with_unreachable = variants.clone();
        with_unreachable.push(b(None, 5.0));
        assert_eq!(
            spread(&b(Some(100.0), 10.0), &with_unreachable).fastest_s,
            None
        );
    }
}
