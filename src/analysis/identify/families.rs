//! One fit per family: the nonlinear parameters by Nelder–Mead over the coarse data (seeded by
//! the first-order fit, or warm-started from an earlier fit of the same family), the shared gain
//! in closed form; then acceptance and the [`Model`] with its first-order equivalent.

use super::data::{Bounds, Prepared};
use super::response::{EpStats, Shape, nelder_mead};
use super::{Family, FamilyKind, HeldOut, INTEGRATING_HORIZON, Model, OpMap, Refusal};

/// A shape with its shared gain.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Part {
    pub(super) shape: Shape,
    pub(super) gain: f64,
}

/// A fitted family.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum Fitted {
    /// One model for every episode, its input through `map` (identity but for
    /// `op_dependent_gain`).
    Single {
        kind: FamilyKind,
        part: Part,
        map: OpMap,
    },
    /// `two_direction`: a first-order model per direction of the PV.
    Split { rise: Part, fall: Part },
}

/// Each side of a `two_direction` model needs at least this many episodes.
pub(super) const MIN_SIDE_EPISODES: usize = 3;

/// What a fit works with: the coarse data it searches on, the bounds, the OP range, the
/// first-order (τ, θ) that seeds the other families.
pub(super) struct Ctx<'a> {
    pub(super) b: Bounds,
    pub(super) op: (f64, f64),
    pub(super) seed: (f64, f64),
    /// Iterations of each Nelder–Mead run (fewer for warm starts).
    pub(super) iters: usize,
    pub(super) data: &'a [Prepared],
}

impl Fitted {
    pub(super) fn kind(&self) -> FamilyKind {
        match self {
            Fitted::Single { kind, .. } => *kind,
            Fitted::Split { .. } => FamilyKind::TwoDirection,
        }
    }

    /// The part and the map that describe episode `seg`.
    pub(super) fn part_for(&self, seg: &Prepared) -> (Part, OpMap) {
        match *self {
            Fitted::Single { part, map, .. } => (part, map),
            Fitted::Split { rise, fall } => (if seg.rising { rise } else { fall }, OpMap::IDENTITY),
        }
    }

    /// Episode `seg`'s statistics under this fit (its nuisance refitted) and its squared error.
    pub(super) fn score(&self, seg: &Prepared) -> (EpStats, f64) {
        let (part, map) = self.part_for(seg);
        let e = if map == OpMap::IDENTITY {
            part.shape.stats(seg)
        } else {
            part.shape.stats(&seg.mapped(&map))
        };
        (e, e.sse_at(part.gain))
    }

    /// The first-order (τ, θ) of a first-order fit, which seeds the other families.
    pub(super) fn first_order_seed(&self) -> Option<(f64, f64)> {
        match self {
            Fitted::Single {
                part:
                    Part {
                        shape: Shape::First { tau, theta },
                        ..
                    },
                ..
            } => Some((*tau, *theta)),
            _ => None,
        }
    }

    pub(super) fn parameters(&self) -> usize {
        match self {
            Fitted::Single { kind, part, .. } => match (kind, part.shape) {
                (_, Shape::Integrating { lag, .. }) => 2 + usize::from(lag > 0.0),
                (FamilyKind::FirstOrder, _) => 3,
                _ => 4,
            },
            Fitted::Split { .. } => 6,
        }
    }
}

/// Fits `kind` on `ctx.data`, from `warm` when given (an earlier fit of the same family).
pub(super) fn fit(kind: FamilyKind, ctx: &Ctx, warm: Option<&Fitted>) -> Option<Fitted> {
    let data = ctx.data;
    let single = |shape: Shape, map: OpMap| -> Fitted {
        let gain = shape.fit(data).gain;
        Fitted::Single {
            kind,
            part: Part { shape, gain },
            map,
        }
    };
    match kind {
        FamilyKind::FirstOrder => {
            let (tau, theta) = match warm.map(|w| w.part_for(&data[0]).0.shape) {
                Some(Shape::First { tau, theta }) => first_search(ctx, data, (tau, theta)),
                _ => first_search(ctx, data, ctx.seed),
            };
            Some(single(Shape::First { tau, theta }, OpMap::IDENTITY))
        }
        FamilyKind::Integrating => Some(single(integrating(ctx, warm), OpMap::IDENTITY)),
        FamilyKind::SecondOrder => Some(single(second_order(ctx, warm), OpMap::IDENTITY)),
        FamilyKind::OpDependentGain => {
            let (shape, map) = valve(ctx, warm);
            let mapped: Vec<Prepared> = data.iter().map(|p| p.mapped(&map)).collect();
            Some(Fitted::Single {
                kind,
                part: Part {
                    shape,
                    gain: shape.fit(&mapped).gain,
                },
                map,
            })
        }
        FamilyKind::TwoDirection => two_direction(ctx, warm),
    }
}

/// The first-order (τ, θ) by Nelder–Mead from `start` on `data`.
fn first_search(ctx: &Ctx, data: &[Prepared], (tau, theta): (f64, f64)) -> (f64, f64) {
    let b = &ctx.b;
    let (l0, l1) = (b.tau_lo.ln(), b.tau_hi.ln());
    let h = data.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    let [lt, th] = nelder_mead(
        |p| first_cost(data, b, p),
        [tau.ln(), theta],
        [0.2, (0.2 * theta).max(h)],
        [1e-2, 0.1 * h],
        ctx.iters,
    );
    (lt.clamp(l0, l1).exp(), th.clamp(0.0, b.theta_hi))
}

fn first_cost(data: &[Prepared], b: &Bounds, p: [f64; 2]) -> f64 {
    let tau = p[0].clamp(b.tau_lo.ln(), b.tau_hi.ln()).exp();
    let theta = p[1].clamp(0.0, b.theta_hi);
    Shape::First { tau, theta }.fit(data).sse
}

/// The best of `starts` by `cost`, then Nelder–Mead from it.
fn minimise<const N: usize>(
    cost: impl Fn([f64; N]) -> f64,
    starts: &[[f64; N]],
    step: [f64; N],
    tol: [f64; N],
    iters: usize,
) -> [f64; N] {
    let best = starts
        .iter()
        .map(|s| (cost(*s), *s))
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .map_or(starts[0], |(_, s)| s);
    nelder_mead(cost, best, step, tol, iters)
}

/// Integrating, searched over (ln τl, θ); a lag shorter than a grid step counts as none.
fn integrating(ctx: &Ctx, warm: Option<&Fitted>) -> Shape {
    let b = &ctx.b;
    let (lag_lo, lag_hi) = ((0.1 * b.min_h).ln(), b.max_dur.ln());
    let to_shape = |p: [f64; 2]| Shape::Integrating {
        lag: p[0].clamp(lag_lo, lag_hi).exp(),
        theta: p[1].clamp(0.0, b.theta_hi),
    };
    let starts: Vec<[f64; 2]> = match warm.map(|w| w.part_for(&ctx.data[0]).0.shape) {
        Some(Shape::Integrating { lag, theta }) => vec![[lag.max(0.1 * b.min_h).ln(), theta]],
        _ => {
            let mut s = Vec::new();
            for fl in [0.1, 0.4, 0.7] {
                for th in [0.0, 0.5 * ctx.seed.1, ctx.seed.1, 0.3 * b.theta_hi] {
                    s.push([lag_lo + fl * (lag_hi - lag_lo), th]);
                }
            }
            s
        }
    };
    let p = minimise(
        |p| to_shape(p).fit(ctx.data).sse,
        &starts,
        [0.5, (0.2 * starts[0][1]).max(b.min_h)],
        [1e-2, 0.1 * b.min_h],
        ctx.iters,
    );
    match to_shape(p) {
        Shape::Integrating { lag, theta } if lag < b.min_h => {
            Shape::Integrating { lag: 0.0, theta }
        }
        s => s,
    }
}

/// Second order, searched over (ln τ1, τ2/τ1, θ) with τ2/τ1 in [0.02, 0.9].
fn second_order(ctx: &Ctx, warm: Option<&Fitted>) -> Shape {
    let b = &ctx.b;
    let (l0, l1) = (b.tau_lo.ln(), b.tau_hi.ln());
    let to_shape = |p: [f64; 3]| {
        let tau1 = p[0].clamp(l0, l1).exp();
        Shape::Second {
            tau1,
            tau2: p[1].clamp(0.02, 0.9) * tau1,
            theta: p[2].clamp(0.0, b.theta_hi),
        }
    };
    let starts: Vec<[f64; 3]> = match warm.map(|w| w.part_for(&ctx.data[0]).0.shape) {
        Some(Shape::Second { tau1, tau2, theta }) => vec![[tau1.ln(), tau2 / tau1, theta]],
        _ => {
            // By the half rule a first-order fit (τ, θ) of a second-order process is about
            // (τ1 + τ2/2, θ + τ2/2).
            let (tau, theta) = ctx.seed;
            [0.1, 0.3, 0.6, 0.9]
                .iter()
                .flat_map(|&r| {
                    let tau1 = tau / (1.0 + r / 2.0);
                    let lag = (theta - r * tau1 / 2.0).max(0.0);
                    [[tau1.ln(), r, lag], [tau1.ln(), r, 0.5 * lag]]
                })
                .collect()
        }
    };
    let p = minimise(
        |p| to_shape(p).fit(ctx.data).sse,
        &starts,
        [0.2, 0.15, (0.2 * starts[0][2]).max(b.min_h)],
        [1e-2, 1e-2, 0.1 * b.min_h],
        2 * ctx.iters,
    );
    to_shape(p)
}

/// The valve shape α and first order after the map, searched over (ln τ, θ, α), α in [−5, 5].
fn valve(ctx: &Ctx, warm: Option<&Fitted>) -> (Shape, OpMap) {
    let b = &ctx.b;
    let (lo, hi) = ctx.op;
    let cost = |p: [f64; 3]| {
        let map = OpMap::new(p[2].clamp(-5.0, 5.0), lo, hi);
        let mapped: Vec<Prepared> = ctx.data.iter().map(|s| s.mapped(&map)).collect();
        first_cost(&mapped, b, [p[0], p[1]])
    };
    let starts: Vec<[f64; 3]> = match warm {
        Some(Fitted::Single {
            part:
                Part {
                    shape: Shape::First { tau, theta },
                    ..
                },
            map,
            ..
        }) => vec![[tau.ln(), *theta, map.shape]],
        _ => [-3.0, -1.5, 0.0, 1.5, 3.0]
            .iter()
            .map(|&a| [ctx.seed.0.ln(), ctx.seed.1, a])
            .collect(),
    };
    let p = minimise(
        cost,
        &starts,
        [0.2, (0.2 * starts[0][1]).max(b.min_h), 0.7],
        [1e-2, 0.1 * b.min_h, 0.02],
        2 * ctx.iters,
    );
    let shape = Shape::First {
        tau: p[0].clamp(b.tau_lo.ln(), b.tau_hi.ln()).exp(),
        theta: p[1].clamp(0.0, b.theta_hi),
    };
    (shape, OpMap::new(p[2].clamp(-5.0, 5.0), lo, hi))
}

/// First order on the rising and on the falling episodes separately.
fn two_direction(ctx: &Ctx, warm: Option<&Fitted>) -> Option<Fitted> {
    let side = |rising: bool| -> Option<Part> {
        let data: Vec<Prepared> = ctx
            .data
            .iter()
            .filter(|p| p.rising == rising)
            .cloned()
            .collect();
        if data.len() < MIN_SIDE_EPISODES {
            return None;
        }
        let start = match warm {
            Some(Fitted::Split { rise, fall }) => match (if rising { rise } else { fall }).shape {
                Shape::First { tau, theta } => (tau, theta),
                _ => ctx.seed,
            },
            _ => ctx.seed,
        };
        let (tau, theta) = first_search(ctx, &data, start);
        let shape = Shape::First { tau, theta };
        Some(Part {
            shape,
            gain: shape.fit(&data).gain,
        })
    };
    Some(Fitted::Split {
        rise: side(true)?,
        fall: side(false)?,
    })
}

/// Re-runs the last stage of the search on the full data (the first-order search already ends
/// there).
pub(super) fn polish(f: Fitted, full: &[Prepared], ctx: &Ctx) -> Fitted {
    let full_ctx = Ctx {
        data: full,
        iters: 60,
        ..*ctx
    };
    match f {
        Fitted::Single {
            kind: FamilyKind::OpDependentGain,
            part,
            map,
        } => {
            let mapped: Vec<Prepared> = full.iter().map(|p| p.mapped(&map)).collect();
            let start = match part.shape {
                Shape::First { tau, theta } => (tau, theta),
                _ => ctx.seed,
            };
            let (tau, theta) = first_search(&full_ctx, &mapped, start);
            let shape = Shape::First { tau, theta };
            Fitted::Single {
                kind: FamilyKind::OpDependentGain,
                part: Part {
                    shape,
                    gain: shape.fit(&mapped).gain,
                },
                map,
            }
        }
        _ => fit(f.kind(), &full_ctx, Some(&f)).unwrap_or(f),
    }
}

/// R² of `f` over `data` (each episode by its own part).
pub(super) fn r2(f: &Fitted, data: &[Prepared]) -> f64 {
    let (mut sse, mut sst) = (0.0, 0.0);
    for seg in data {
        let (e, sse_e) = f.score(seg);
        sse += sse_e;
        sst += e.sst;
    }
    if sst > 0.0 { 1.0 - sse / sst } else { 0.0 }
}

/// The model, unless it explains too little (R² below `min_r2`) or a time constant ran to the
/// top of the search, where the data cannot tell it.
pub(super) fn accept(
    f: &Fitted,
    data: &[Prepared],
    b: &Bounds,
    min_r2: f64,
) -> Result<Model, Refusal> {
    let r2 = r2(f, data);
    let parts = match f {
        Fitted::Single { part, .. } => vec![*part],
        Fitted::Split { rise, fall } => vec![*rise, *fall],
    };
    if r2 < min_r2 || parts.iter().any(|p| !p.gain.is_finite() || p.gain == 0.0) {
        return Err(Refusal::PoorFit { r2, min_r2 });
    }
    let slowest = parts
        .iter()
        .map(|p| match p.shape {
            Shape::First { tau, .. } => tau,
            Shape::Second { tau1, .. } => tau1,
            Shape::Integrating { .. } => 0.0,
        })
        .fold(0.0, f64::max);
    if slowest > 0.95 * b.tau_hi {
        return Err(Refusal::TimeConstantUndetermined { limit_s: b.tau_hi });
    }
    Ok(model(f, b, r2, data))
}

/// The [`Model`] of a fit, with its first-order equivalent (see [`Model`]).
fn model(f: &Fitted, b: &Bounds, fit_r2: f64, data: &[Prepared]) -> Model {
    let fo = |p: &Part| match p.shape {
        Shape::First { tau, theta } => (p.gain, tau, theta),
        Shape::Second { tau1, tau2, theta } => (p.gain, tau1 + tau2 / 2.0, theta + tau2 / 2.0),
        Shape::Integrating { lag, theta } => {
            let t = INTEGRATING_HORIZON * b.max_dur;
            (p.gain * t, t, theta + lag / 2.0)
        }
    };
    let (part, family, slope) = match *f {
        Fitted::Split { rise, fall } => {
            let (k, tau, theta) = fo(&fall);
            let rising_episodes = data.iter().filter(|p| p.rising).count();
            let family = Family::TwoDirection {
                falling_gain: k,
                falling_time_constant_s: tau,
                falling_dead_time_s: theta,
                rising_episodes,
                falling_episodes: data.len() - rising_episodes,
            };
            (rise, family, 1.0)
        }
        // The local gain at the middle of the OP range.
        Fitted::Single { part, map, .. } => (
            part,
            single_family(&part, &map),
            map.slope(0.5 * (map.lo + map.hi)),
        ),
    };
    let (gain, time_constant_s, dead_time_s) = fo(&part);
    Model {
        gain: gain * slope,
        time_constant_s,
        dead_time_s,
        fit_r2,
        episodes_used: data.len(),
        points_used: data.iter().map(|p| p.y.len()).sum(),
        family,
        held_out: HeldOut::default(),
    }
}

fn single_family(part: &Part, map: &OpMap) -> Family {
    match part.shape {
        Shape::Integrating { lag, theta } => Family::Integrating {
            gain_per_s: part.gain,
            lag_s: (lag > 0.0).then_some(lag),
            process_dead_time_s: theta,
        },
        Shape::Second { tau1, tau2, theta } => Family::SecondOrder {
            first_time_constant_s: tau1,
            second_time_constant_s: tau2,
            process_dead_time_s: theta,
        },
        Shape::First { .. } if *map != OpMap::IDENTITY => Family::OpDependentGain {
            valve_shape: map.shape,
            mapped_gain: part.gain,
            op_min: map.lo,
            op_max: map.hi,
            gain_at_op_min: part.gain * map.slope(map.lo),
            gain_at_op_max: part.gain * map.slope(map.hi),
        },
        Shape::First { .. } => Family::FirstOrder,
    }
}

/// The fit a model came from (to warm-start refits of the same family).
pub(super) fn from_model(m: &Model) -> Fitted {
    let first = |gain, tau, theta| Part {
        shape: Shape::First { tau, theta },
        gain,
    };
    let single = |kind, part| Fitted::Single {
        kind,
        part,
        map: OpMap::IDENTITY,
    };
    let (k, tau, theta) = (m.gain, m.time_constant_s, m.dead_time_s);
    match m.family {
        Family::FirstOrder => single(FamilyKind::FirstOrder, first(k, tau, theta)),
        Family::Integrating {
            gain_per_s,
            lag_s,
            process_dead_time_s,
        } => single(
            FamilyKind::Integrating,
            Part {
                shape: Shape::Integrating {
                    lag: lag_s.unwrap_or(0.0),
                    theta: process_dead_time_s,
                },
                gain: gain_per_s,
            },
        ),
        Family::SecondOrder {
            first_time_constant_s,
            second_time_constant_s,
            process_dead_time_s,
        } => single(
            FamilyKind::SecondOrder,
            Part {
                shape: Shape::Second {
                    tau1: first_time_constant_s,
                    tau2: second_time_constant_s,
                    theta: process_dead_time_s,
                },
                gain: k,
            },
        ),
        Family::OpDependentGain { mapped_gain, .. } => Fitted::Single {
            kind: FamilyKind::OpDependentGain,
            part: first(mapped_gain, tau, theta),
            map: m.op_map(),
        },
        Family::TwoDirection {
            falling_gain,
            falling_time_constant_s,
            falling_dead_time_s,
            ..
        } => Fitted::Split {
            rise: first(k, tau, theta),
            fall: first(falling_gain, falling_time_constant_s, falling_dead_time_s),
        },
    }
}
