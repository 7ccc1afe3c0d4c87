//! The figures of "Numbers to reach", measured on the analysis's output against the truth.

use super::loops::{Family, TrustLoop, VARIANTS, Variant, degraded};
use super::truth::{Truth, truths};
use crate::common::sim::{series, setup as loop_setup};
use headroom::analysis::confidence::Confidence;
use headroom::analysis::sim::{LoopSim, PlantSimConfig};
use headroom::analysis::{EpisodeResult, Verdict, analyze_loop};

/// Whether the analysis states a verdict as clear: conclusive, with a clear confidence.
pub(super) fn is_clear(e: &EpisodeResult) -> bool {
    e.verdict != Verdict::Inconclusive && e.confidence == Some(Confidence::Clear)
}

/// Whether the analysis abstained on a change: inconclusive, or a marginal verdict.
pub(super) fn abstains(e: &EpisodeResult) -> bool {
    e.verdict == Verdict::Inconclusive || !is_clear(e)
}

/// A clear actuator-side verdict (`actuator_limited` or `unreachable`).
pub(super) fn clear_actuator_flag(e: &EpisodeResult) -> bool {
    e.verdict.is_actuator_miss() && is_clear(e)
}

/// One change as one analysed record saw it.
pub(super) struct Seen {
    pub(super) family: Family,
    pub(super) variant: Variant,
    pub(super) loop_k: usize,
    pub(super) sample_s: f64,
    pub(super) truth: Truth,
    pub(super) got: Option<EpisodeResult>,
}

/// What one loop gives: every change as each record saw it, and the self-contradictions.
pub(super) struct LoopOutcome {
    pub(super) seen: Vec<Seen>,
    /// (variant, description) of each episode that settled faster than its reported t*.
    pub(super) contradictions: Vec<(Variant, String)>,
}

pub(super) fn study(k: usize, l: &TrustLoop) -> LoopOutcome {
    let (_, truths) = truths(l);
    let smallest = truths
        .iter()
        .map(|t| (t.sp_to - t.sp_from).abs())
        .fold(f64::INFINITY, f64::min);
    let mut sim = LoopSim::of_plant(PlantSimConfig {
        noise_sd: 0.002 * smallest,
        seed: 1000 + k as u64,
        ..l.plant
    });
    let noisy = sim.run(&l.schedule, l.duration_s, l.sample_s);
    let setup = loop_setup("XIC-1", &l.plant.controller, l.spec);
    let mut out = LoopOutcome {
        seen: Vec::new(),
        contradictions: Vec::new(),
    };
    // Each loop is analysed clean and in half the degraded variants (alternating with the loop's
    // parity), which keeps the run short and every variant on half the loops.
    let variants = VARIANTS
        .iter()
        .enumerate()
        .filter(|&(i, _)| i == 0 || i % 2 == k % 2)
        .map(|(_, v)| *v);
    for variant in variants {
        let (rec, tol) = degraded(l, &noisy, variant, k);
        let report = analyze_loop(&series(&rec, 0.0), &setup);
        for e in &report.episodes {
            if let (Some(ts), Some(tb)) = (e.settling_time_s, e.min_settling_time_s)
                && ts < tb
            {
                out.contradictions.push((
                    variant,
                    format!(
                        "loop {k} {:?} {variant:?} change at {}: settled in {ts} s, t* {tb} s",
                        l.family, e.start_s
                    ),
                ));
            }
        }
        for t in &truths {
            let got = report
                .episodes
                .iter()
                .find(|e| e.start_s >= t.t0 - 1e-6 && e.start_s <= t.t0 + tol + 1e-6)
                .filter(|e| (e.sp_to - t.sp_to).abs() < 1e-9)
                .cloned();
            out.seen.push(Seen {
                family: l.family,
                variant,
                loop_k: k,
                sample_s: l.sample_s,
                truth: t.clone(),
                got,
            });
        }
    }
    out
}

/// A share `n / d` and its parts, for the table.
#[derive(Default, Clone, Copy)]
pub(super) struct Share {
    pub(super) n: usize,
    pub(super) d: usize,
}

impl Share {
    pub(super) fn add(&mut self, hit: bool) {
        self.d += 1;
        self.n += usize::from(hit);
    }
    pub(super) fn pct(self) -> f64 {
        if self.d == 0 {
            f64::NAN
        } else {
            100.0 * self.n as f64 / self.d as f64
        }
    }
    pub(super) fn show(self) -> String {
        format!("{:5.1} % ({}/{})", self.pct(), self.n, self.d)
    }
}

/// Every figure of "Numbers to reach", from every change as every record saw it.
#[derive(Default)]
pub(super) struct Figures {
    pub(super) verdicts_exact: Share,
    pub(super) settling_ok: Share,
    pub(super) t_star_ok: Share,
    pub(super) false_flags_degraded: Share,
    pub(super) abstentions_clean: Share,
    pub(super) contradictions: usize,
    // Context, not targets.
    pub(super) verdicts_exact_first_order: Share,
    pub(super) false_flags_clean: Share,
    pub(super) by_truth: std::collections::BTreeMap<&'static str, usize>,
    /// The t* figure family by family.
    pub(super) t_star_by_family: std::collections::BTreeMap<Family, Share>,
    pub(super) misses: Vec<String>,
}

pub(super) fn measure(outcomes: &[LoopOutcome]) -> Figures {
    let mut f = Figures::default();
    for o in outcomes {
        f.contradictions += o.contradictions.len();
        f.misses.extend(
            o.contradictions
                .iter()
                .map(|(_, m)| format!("contradiction: {m}")),
        );
        for s in &o.seen {
            count(&mut f, s);
        }
    }
    f
}

pub(super) fn count(f: &mut Figures, s: &Seen) {
    let t = &s.truth;
    let clean = s.variant == Variant::Clean;
    let label = format!(
        "loop {} {:?} {:?} change at {} ({} → {})",
        s.loop_k, s.family, s.variant, t.t0, t.sp_from, t.sp_to
    );
    let non_first = s.family != Family::FirstOrder;
    // t* against the brute-force truth, from steady state, setpoint clearly reachable.
    if clean
        && non_first
        && t.from_rest
        && t.clearly_reachable
        && let Some(truth) = t.t_star_s
    {
        let got = s.got.as_ref().and_then(|e| e.min_settling_time_s);
        let ok = got.is_some_and(|g| (g - truth).abs() <= 0.15 * truth);
        f.t_star_ok.add(ok);
        f.t_star_by_family.entry(s.family).or_default().add(ok);
        if !ok {
            f.misses
                .push(format!("{label}: t* {got:?} vs true {truth:.1}"));
        }
    }
    let Some(want) = t.verdict else { return };
    if clean && non_first {
        *f.by_truth.entry(want.as_str()).or_default() += 1;
    }
    let Some(got) = &s.got else {
        if clean {
            f.misses.push(format!("{label}: change not found"));
            f.abstentions_clean.add(true);
        }
        return;
    };
    if clean {
        f.abstentions_clean.add(abstains(got));
        if !abstains(got) {
            let share = if non_first {
                &mut f.verdicts_exact
            } else {
                &mut f.verdicts_exact_first_order
            };
            share.add(got.verdict == want);
            if got.verdict != want {
                f.misses.push(format!(
                    "{label}: want {want:?} got {:?} ({})",
                    got.verdict, got.reason
                ));
            }
        }
        if non_first
            && t.settling_clear
            && let Some(a) = t.settling_s
        {
            let ok = got
                .settling_time_s
                .is_some_and(|b| (a - b).abs() <= (2.0 * s.sample_s).max(0.05 * a));
            f.settling_ok.add(ok);
            if !ok {
                f.misses.push(format!(
                    "{label}: settled {:?} vs true {a}",
                    got.settling_time_s
                ));
            }
        }
    }
    let false_flag =
        matches!(want, Verdict::Met | Verdict::TuningLimited) && clear_actuator_flag(got);
    if clean {
        f.false_flags_clean.add(false_flag);
    } else {
        f.false_flags_degraded.add(false_flag);
        if false_flag {
            f.misses.push(format!(
                "{label}: false flag {:?} ({})",
                got.verdict, got.reason
            ));
        }
    }
}
