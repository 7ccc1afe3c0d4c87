//! Choosing the family by held-out episodes, fitting one family, and bootstrap replicates.

use super::super::sim::Rng;
use super::data::{Bounds, Prepared, coarse, excited};
use super::families::{self, Ctx, Fitted, MIN_SIDE_EPISODES, Part, accept, fit, polish};
use super::first_order;
use super::response::Shape;
use super::{FamilyKind, FamilyScore, IdSegment, IdentifySettings, Model, OpMap, Refusal};

/// Episodes are held out in this many folds.
pub const FOLDS: usize = 4;
/// With fewer excited episodes nothing can be held out: first order is fitted (integrating when
/// the first-order time constant is undetermined) and `held_out` stays empty.
pub const MIN_EPISODES_FOR_SELECTION: usize = 4;
/// A family replaces the current choice only when its held-out RMS error is at least this
/// share lower.
pub const CLEAR_IMPROVEMENT: f64 = 0.12;

/// The data of a fit: the excited episodes in full and thinned, the search bounds, and the
/// first-order (τ, θ) on them.
struct Pool {
    full: Vec<Prepared>,
    coarse: Vec<Prepared>,
    b: Bounds,
    op: (f64, f64),
}

impl Pool {
    fn new<'a>(
        segments: impl IntoIterator<Item = &'a IdSegment>,
        noise_sd: f64,
        op_range: (f64, f64),
        max_dead_time_s: Option<f64>,
        settings: &IdentifySettings,
    ) -> Result<Pool, Refusal> {
        let segments: Vec<&IdSegment> = segments.into_iter().collect();
        if segments.is_empty() {
            return Err(Refusal::NoEpisodes);
        }
        let (lo, hi) = (op_range.0.min(op_range.1), op_range.0.max(op_range.1));
        let full = excited(segments, noise_sd, hi - lo, settings.max_episodes)?;
        let b = Bounds::of(&full, max_dead_time_s);
        Ok(Pool {
            coarse: coarse(&full),
            full,
            b,
            op: (lo, hi),
        })
    }

    fn ctx<'a>(&self, seed: (f64, f64), data: &'a [Prepared], iters: usize) -> Ctx<'a> {
        Ctx {
            b: self.b,
            op: self.op,
            seed,
            iters,
            data,
        }
    }

    /// The first-order fit, searched in full (seed, probes, coarse then fine).
    fn first_order(&self) -> Fitted {
        let (tau, theta) = first_order::search(&self.coarse, &self.full, &self.b);
        let shape = Shape::First { tau, theta };
        Fitted::Single {
            kind: FamilyKind::FirstOrder,
            part: Part {
                shape,
                gain: shape.fit(&self.full).gain,
            },
            map: OpMap::IDENTITY,
        }
    }

    /// `kind` fitted on the coarse data, polished on the full data, accepted or refused.
    fn fit_polished(
        &self,
        kind: FamilyKind,
        seed: (f64, f64),
        min_r2: f64,
    ) -> Result<Model, Refusal> {
        let ctx = self.ctx(seed, &self.coarse, 80);
        let f = fit(kind, &ctx, None).ok_or_else(|| self.too_few(kind))?;
        accept(&polish(f, &self.full, &ctx), &self.full, &self.b, min_r2)
    }

    fn too_few(&self, kind: FamilyKind) -> Refusal {
        let rising = self.full.iter().filter(|p| p.rising).count();
        Refusal::TooFewEpisodes {
            family: kind.as_str(),
            rising,
            falling: self.full.len() - rising,
            needed: MIN_SIDE_EPISODES,
        }
    }
}

/// First order refused with an undetermined time constant: the integrating family instead.
fn integrating_instead(pool: &Pool, seed: (f64, f64), fo: Refusal, min_r2: f64) -> Refusal {
    match (fo, pool.fit_polished(FamilyKind::Integrating, seed, min_r2)) {
        (Refusal::TimeConstantUndetermined { limit_s }, Err(Refusal::PoorFit { r2, .. })) => {
            Refusal::IntegratingPoorFit {
                limit_s,
                r2,
                min_r2,
            }
        }
        (fo, _) => fo,
    }
}

/// Identifies the loop's model, choosing the family by held-out episodes (see the module
/// documentation of [`super`] for the rule). `noise_sd` is an estimate of the PV measurement
/// noise, used only to judge whether the data excite the process; `op_range` is the OP's
/// (min, max). `max_dead_time_s`, when known, bounds the dead-time search: the PV cannot start
/// to respond before the dead time, so the earliest time any episode's PV covered 10 % of its
/// change is a safe upper bound, and a tight one keeps the search on the physically possible
/// part.
pub fn identify<'a>(
    segments: impl IntoIterator<Item = &'a IdSegment>,
    noise_sd: f64,
    op_range: (f64, f64),
    max_dead_time_s: Option<f64>,
    settings: &IdentifySettings,
) -> Result<Model, Refusal> {
    let pool = Pool::new(segments, noise_sd, op_range, max_dead_time_s, settings)?;
    let min_r2 = settings.min_r2;
    let fo = pool.first_order();
    let seed = fo.first_order_seed().unwrap_or(pool.b.seed());
    let fo_model = accept(&fo, &pool.full, &pool.b, min_r2);
    if pool.full.len() < MIN_EPISODES_FOR_SELECTION {
        return match fo_model {
            Err(e @ Refusal::TimeConstantUndetermined { .. }) => pool
                .fit_polished(FamilyKind::Integrating, seed, min_r2)
                .map_err(|_| integrating_instead(&pool, seed, e, min_r2)),
            r => r,
        };
    }
    let ctx = pool.ctx(seed, &pool.coarse, 80);
    // Every family on the coarse data: (fit, accepted on it?, held-out RMS).
    let mut tried: Vec<(Fitted, bool, Option<f64>)> = Vec::new();
    let fo_coarse = fit(FamilyKind::FirstOrder, &ctx, Some(&fo)).unwrap_or(fo);
    tried.push((fo_coarse, fo_model.is_ok(), held_out_rms(&fo_coarse, &ctx)));
    for kind in &FamilyKind::ALL[1..] {
        if let Some(f) = fit(*kind, &ctx, None) {
            let ok = accept(&f, &pool.coarse, &pool.b, min_r2).is_ok();
            tried.push((f, ok, held_out_rms(&f, &ctx)));
        }
    }
    let chosen = choose(&tried);
    let mut model = match chosen {
        None => {
            return match fo_model {
                Err(e @ Refusal::TimeConstantUndetermined { .. }) => {
                    Err(integrating_instead(&pool, seed, e, min_r2))
                }
                r => r,
            };
        }
        Some(0) => fo_model?,
        Some(i) => {
            let polished = polish(tried[i].0, &pool.full, &ctx);
            match accept(&polished, &pool.full, &pool.b, min_r2) {
                Ok(m) => m,
                Err(e) => fo_model.map_err(|_| e)?,
            }
        }
    };
    for (f, ok, rms) in &tried {
        if let (true, Some(rms_error)) = (ok, rms) {
            model.held_out.push(FamilyScore {
                family: f.kind(),
                rms_error: *rms_error,
                parameters: f.parameters(),
            });
        }
    }
    Ok(model)
}

/// The rule: the first accepted family with a held-out score is the choice (first order when
/// it is accepted); each later one replaces the choice only when its held-out RMS error is at
/// least [`CLEAR_IMPROVEMENT`] lower.
fn choose(tried: &[(Fitted, bool, Option<f64>)]) -> Option<usize> {
    let mut chosen: Option<(usize, f64)> = None;
    for (i, (_, ok, rms)) in tried.iter().enumerate() {
        let (true, Some(rms)) = (ok, rms) else {
            continue;
        };
        match chosen {
            Some((_, best)) if *rms > (1.0 - CLEAR_IMPROVEMENT) * best => {}
            _ => chosen = Some((i, *rms)),
        }
    }
    chosen.map(|(i, _)| i)
}

/// The RMS error of `f`'s family on held-out episodes: fitted on the other folds (from `f`),
/// scored on each fold with only its episodes' offsets and initial transients refitted. `None`
/// when a fold cannot be fitted.
fn held_out_rms(f: &Fitted, ctx: &Ctx) -> Option<f64> {
    let n = ctx.data.len();
    let folds = FOLDS.min(n);
    // Folds are dealt within each direction of the PV apart, so every training set keeps about
    // three quarters of the rising and of the falling episodes (what a family fitted to each
    // direction apart needs).
    let mut seen = [0usize; 2];
    let fold_of: Vec<usize> = ctx
        .data
        .iter()
        .map(|p| {
            let side = &mut seen[usize::from(p.rising)];
            *side += 1;
            (*side - 1) % folds
        })
        .collect();
    let (mut sse, mut points) = (0.0, 0usize);
    for k in 0..folds {
        let train: Vec<Prepared> = ctx
            .data
            .iter()
            .zip(&fold_of)
            .filter(|(_, fold)| **fold != k)
            .map(|(p, _)| p.clone())
            .collect();
        let fold = Ctx {
            data: &train,
            iters: 40,
            ..*ctx
        };
        let g = fit(f.kind(), &fold, Some(f))?;
        for (seg, _) in ctx
            .data
            .iter()
            .zip(&fold_of)
            .filter(|(_, fold)| **fold == k)
        {
            let (e, sse_e) = g.score(seg);
            sse += sse_e;
            points += e.n;
        }
    }
    (points > 0).then(|| (sse / points as f64).sqrt())
}

/// Fits one family (no selection, `held_out` empty).
pub fn fit_family<'a>(
    kind: FamilyKind,
    segments: impl IntoIterator<Item = &'a IdSegment>,
    noise_sd: f64,
    op_range: (f64, f64),
    max_dead_time_s: Option<f64>,
    settings: &IdentifySettings,
) -> Result<Model, Refusal> {
    let pool = Pool::new(segments, noise_sd, op_range, max_dead_time_s, settings)?;
    let fo = pool.first_order();
    if kind == FamilyKind::FirstOrder {
        return accept(&fo, &pool.full, &pool.b, settings.min_r2);
    }
    let seed = fo.first_order_seed().unwrap_or(pool.b.seed());
    pool.fit_polished(kind, seed, settings.min_r2)
}

/// `count` bootstrap replicates of `model`: episodes resampled with replacement (per direction
/// for `two_direction`), the same family refitted on the coarse data from the model's
/// parameters. Deterministic from `seed`. Replicates whose refit is refused are left out, so
/// fewer than `count` may come back.
#[allow(clippy::too_many_arguments)]
pub fn replicates<'a>(
    model: &Model,
    segments: impl IntoIterator<Item = &'a IdSegment>,
    noise_sd: f64,
    op_range: (f64, f64),
    max_dead_time_s: Option<f64>,
    settings: &IdentifySettings,
    count: usize,
    seed: u64,
) -> Vec<Model> {
    let Ok(pool) = Pool::new(segments, noise_sd, op_range, max_dead_time_s, settings) else {
        return Vec::new();
    };
    let warm = families::from_model(model);
    let fo_seed = (model.time_constant_s, model.dead_time_s);
    let mut rng = Rng::new(seed);
    let sides: Vec<Vec<usize>> = if warm.kind() == FamilyKind::TwoDirection {
        [true, false]
            .iter()
            .map(|&r| {
                (0..pool.coarse.len())
                    .filter(|&i| pool.coarse[i].rising == r)
                    .collect()
            })
            .collect()
    } else {
        vec![(0..pool.coarse.len()).collect()]
    };
    let mut out = Vec::with_capacity(count);
    for _ in 0..count {
        let mut sample: Vec<Prepared> = Vec::with_capacity(pool.coarse.len());
        for side in &sides {
            for _ in 0..side.len() {
                let i = side[(rng.next_u64() % side.len() as u64) as usize];
                sample.push(pool.coarse[i].clone());
            }
        }
        let ctx = pool.ctx(fo_seed, &sample, 40);
        if let Some(m) = fit(warm.kind(), &ctx, Some(&warm))
            .and_then(|f| accept(&f, &sample, &pool.b, f64::NEG_INFINITY).ok())
        {
            out.push(m);
        }
    }
    out
}
