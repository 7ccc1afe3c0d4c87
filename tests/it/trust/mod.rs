//! Whether the verdicts can be trusted, measured on a simulated corpus of every model family with
//! a known truth, on clean and on degraded data.
//!
//! Each corpus loop is one of the design's families (first order, second order overdamped,
//! integrating with an optional lag, two-direction, through an equal-percentage valve; plant
//! models in `analysis::sim`) under a PI controller tuned by SIMC (Skogestad 2003) from tight to
//! sluggish, with actuator limits that sometimes bind, stepped up and down. A change starts from
//! wherever the plant is, including straight after an unreachable step with the PV on its
//! saturated plateau.
//!
//! The truth of each change comes from the noise-free run and the true plant, never from the
//! analysis: `met` when the noise-free response met the spec; otherwise `unreachable` when no OP
//! within the limits holds the PV on the new setpoint, `actuator_limited` when the fastest
//! settling the plant allows from its state at the change (brute force on the true plant,
//! `common::truth`) exceeds the spec time, else `tuning_limited`. Only clear-cut changes are
//! kept: noise-free settling not within 10 % of the spec time (nor the spec time between the
//! settling times into a band 20 % narrower and 20 % wider), overshoot not within 3 points of its
//! limit, the setpoint not within 5 % of |Δ| of the actuator's reach, and the true t* not within
//! 25 % of the spec time. Settling times are compared only where they are well defined (the same
//! within tolerance for a band 20 % narrower or wider).
//!
//! The analysed runs add PV noise (clean), then degrade that record as historians do
//! (`common::degrade`). The figures of "Numbers to reach" are measured on the analysis's output
//! and printed in one table (`--nocapture`); each target is asserted.

mod loops;
mod measure;
mod truth;

use headroom::analysis::sim::Rng;
use loops::{FAMILIES, LOOPS_PER_FAMILY, TrustLoop, random_loop};
use measure::{Figures, LoopOutcome, measure, study};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Mutex, OnceLock};

/// The corpus, generated in order from one seed, analysed loop by loop on two threads.
fn corpus_outcomes() -> Vec<LoopOutcome> {
    let mut rng = Rng::new(12);
    let loops: Vec<TrustLoop> = FAMILIES
        .iter()
        .flat_map(|&fam| (0..LOOPS_PER_FAMILY).map(move |_| fam))
        .map(|fam| random_loop(fam, &mut rng))
        .collect();
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<LoopOutcome>>> =
        Mutex::new((0..loops.len()).map(|_| None).collect());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| {
                loop {
                    let k = next.fetch_add(1, Ordering::Relaxed);
                    let Some(l) = loops.get(k) else { break };
                    let o = study(k, l);
                    results.lock().unwrap()[k] = Some(o);
                }
            });
        }
    });
    results
        .into_inner()
        .unwrap()
        .into_iter()
        .map(|o| o.expect("every loop studied"))
        .collect()
}

/// The figures, measured once for all the tests below and printed as one table.
fn figures() -> &'static Figures {
    static FIGURES: OnceLock<Figures> = OnceLock::new();
    FIGURES.get_or_init(|| {
        let outcomes = corpus_outcomes();
        let f = measure(&outcomes);
        print_table(outcomes.len(), &f);
        f
    })
}

fn print_table(loops: usize, f: &Figures) {
    eprintln!(
        "trust corpus: {loops} loops ({LOOPS_PER_FAMILY} per family); clear truths of the \
         non-first-order clean corpus by kind {:?}",
        f.by_truth
    );
    eprintln!("{:<66} {:>22}  target", "figure", "measured");
    let rows = [
        (
            "verdicts exact, non-first-order, clean (answered changes)",
            f.verdicts_exact.show(),
            "≥ 95 %",
        ),
        (
            "settling within max(2 samples, 5 %), non-first-order, clean",
            f.settling_ok.show(),
            "≥ 95 %",
        ),
        (
            "t* within 15 % of the truth, from steady state, non-first-order",
            f.t_star_ok.show(),
            "≥ 90 %",
        ),
        (
            "false flags on degraded data",
            f.false_flags_degraded.show(),
            "≤ 2 %",
        ),
        (
            "abstentions (marginal or inconclusive) on clean data",
            f.abstentions_clean.show(),
            "≤ 15 %",
        ),
        (
            "self-contradictions (settled faster than the reported t*)",
            f.contradictions.to_string(),
            "= 0",
        ),
        (
            "context: verdicts exact, first order, clean",
            f.verdicts_exact_first_order.show(),
            "—",
        ),
        (
            "context: false flags on clean data",
            f.false_flags_clean.show(),
            "—",
        ),
    ];
    for (name, value, target) in rows {
        eprintln!("{name:<66} {value:>22}  {target}");
    }
    for (family, share) in &f.t_star_by_family {
        eprintln!("  t* within 15 %, {family:?}: {}", share.show());
    }
    for m in f.misses.iter().take(60) {
        eprintln!("  {m}");
    }
    if f.misses.len() > 60 {
        eprintln!("  … and {} more", f.misses.len() - 60);
    }
}

#[test]
fn the_trust_corpus_holds_every_verdict_kind() {
    // Every verdict kind must be represented, or the corpus proves little.
    let f = figures();
    for v in ["met", "tuning_limited", "actuator_limited", "unreachable"] {
        assert!(
            f.by_truth.get(v).is_some_and(|n| *n >= 10),
            "too few {v}: {:?}",
            f.by_truth
        );
    }
}

#[test]
fn verdicts_are_exact_on_the_non_first_order_corpus() {
    let f = figures();
    assert!(
        f.verdicts_exact.pct() >= 95.0,
        "verdicts exact on {}",
        f.verdicts_exact.show()
    );
}

#[test]
fn settling_times_are_measured_within_two_samples_or_5_percent() {
    let f = figures();
    assert!(
        f.settling_ok.pct() >= 95.0,
        "settling within tolerance on {}",
        f.settling_ok.show()
    );
}

#[test]
fn the_fastest_settling_is_within_15_percent_of_the_brute_force_truth() {
    let f = figures();
    assert!(
        f.t_star_ok.pct() >= 90.0,
        "t* within 15 % on {}",
        f.t_star_ok.show()
    );
}

#[test]
fn degraded_data_raises_almost_no_false_actuator_flags() {
    let f = figures();
    assert!(
        f.false_flags_degraded.pct() <= 2.0,
        "false flags on degraded data: {}",
        f.false_flags_degraded.show()
    );
}

#[test]
fn clean_data_gets_an_answer_on_most_changes() {
    let f = figures();
    assert!(
        f.abstentions_clean.pct() <= 15.0,
        "abstentions on clean data: {}",
        f.abstentions_clean.show()
    );
}

#[test]
fn no_change_settles_faster_than_its_reported_bound() {
    assert_eq!(figures().contradictions, 0, "self-contradictions");
}
