//! The summary's regulation figures, re-analysed from each loop's stored samples: per period,
//! the aligned rows the live tracker would see (with the mode), the analysis core's holds
//! (`assess`) and its [`regulation`] over them, with the loop's setup.
//!
//! One loop-week is read and analysed at a time and dropped before the next (a week of a 1 Hz
//! loop is some 600,000 rows); the analysis runs off the runtime's worker threads, so a daemon
//! making its weekly summary keeps ingesting meanwhile.

use super::evidence::lead_in_ms;
use super::period::Period;
use super::plot::EpisodeSamples;
use super::regulation::RegulationRun;
use super::trend::model_at;
use crate::analysis::assess::{assess, regulation_settings};
use crate::analysis::live::{self, Row};
use crate::analysis::regulation::{Disturbance, regulation, words};
use crate::analysis::{LoopSetup, Series};
use crate::store::{ModelRow, Store};
use crate::units::s_to_ms;

/// One loop's regulation over each of `periods` (oldest first; `None` for a period without
/// samples), and the samples around the report period's worst disturbance, for its plot.
/// `models`: the loop's stored models, oldest first; the one in force at a period's end gives
/// the dead time of its minimum-variance index.
pub(super) async fn regulation_runs(
    store: &Store,
    setup: &LoopSetup,
    models: &[ModelRow],
    periods: &[Period],
) -> Result<(Vec<Option<RegulationRun>>, Option<EpisodeSamples>), crate::store::Error> {
    let mut runs = Vec::with_capacity(periods.len());
    let mut worst = None;
    for (i, p) in periods.iter().enumerate() {
        // The period is [from, to); the store reads both ends inclusive.
        let (rows, _) = store
            .loop_rows(&setup.tag, p.from_ms(), p.to_ms() - 1)
            .await?;
        let stored_dead_time_s = model_at(models, p.to_ms()).map(|m| m.dead_time_s);
        let setup = setup.clone();
        let own_period = i + 1 == periods.len();
        let done = tokio::task::spawn_blocking(move || {
            analyse(rows, &setup, stored_dead_time_s, own_period)
        })
        .await;
        let (run, samples) = match done {
            Ok(done) => done,
            Err(e) if e.is_panic() => std::panic::resume_unwind(e.into_panic()),
            // Cancelled: the runtime is shutting down, and the summary with it.
            Err(_) => (None, None),
        };
        runs.push(run);
        if own_period {
            worst = samples;
        }
    }
    Ok((runs, worst))
}

/// The regulation of one period's rows, and with `plot` the samples around its worst
/// disturbance. `stored_dead_time_s`: the stored model's, preferred to the one `assess`
/// identifies from these rows alone (the summary shows the stored model).
pub(super) fn analyse(
    rows: Vec<Row>,
    setup: &LoopSetup,
    stored_dead_time_s: Option<f64>,
    plot: bool,
) -> (Option<RegulationRun>, Option<EpisodeSamples>) {
    let Some(series) = series_of(rows) else {
        return (None, None);
    };
    let a = assess(&series, setup);
    let mut settings = regulation_settings(setup, a.model.as_ref().ok());
    settings.dead_time_s = stored_dead_time_s.or(settings.dead_time_s);
    let r = regulation(&series, &a.holds, &settings);
    let samples = words::worst(&r.disturbances)
        .filter(|_| plot)
        .map(|d| around(&series, d));
    let run = RegulationRun {
        dead_time_s: settings.dead_time_s,
        regulation: r,
    };
    (Some(run), samples)
}

/// The rows as a series (the loop in automatic where no mode is stored); `None` for too few
/// rows to hold anything.
fn series_of(rows: Vec<Row>) -> Option<Series> {
    if rows.len() < 3 {
        return None;
    }
    match live::series_of(&rows) {
        Ok(s) => Some(s),
        Err(e) => {
            // The store keeps finite values with unique times, so this is a bug upstream.
            tracing::warn!(error = %e, "stored rows do not form a series; regulation skipped");
            None
        }
    }
}

/// The samples from a lead-in before the disturbance to as long after its end (a tenth of its
/// length, at least a minute each), as (ms, value) pairs.
fn around(series: &Series, d: &Disturbance) -> EpisodeSamples {
    let length_ms = s_to_ms(d.end_s - d.start_s);
    let margin_ms = lead_in_ms(length_ms);
    let (from, to) = (s_to_ms(d.start_s) - margin_ms, s_to_ms(d.end_s) + margin_ms);
    let t = series.time_s();
    let first = t.partition_point(|&x| s_to_ms(x) < from);
    let last = t.partition_point(|&x| s_to_ms(x) <= to);
    let pick = |v: &[f64]| {
        (first..last)
            .map(|i| (s_to_ms(t[i]), v[i]))
            .collect::<Vec<_>>()
    };
    EpisodeSamples {
        sp: pick(series.sp()),
        pv: pick(series.pv()),
        op: pick(series.op()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::Spec;
    use crate::analysis::regulation::DisturbanceVerdict;

    /// Six hours at 1 s, SP 50; a load at 2 h drives the PV 3 units off for 20 min while the
    /// OP sits at its top limit, then the PV comes back.
    fn rows() -> Vec<Row> {
        let mut rng = crate::analysis::sim::Rng::new(3);
        (0..21_600)
            .map(|i| {
                let t = f64::from(i);
                let loaded = (7_200.0..8_400.0).contains(&t);
                let noise = 0.02 * rng.normal();
                Row {
                    time_s: 1_795_392_000.0 + t,
                    sp: 50.0,
                    pv: 50.0 + if loaded { -3.0 } else { 0.0 } + noise,
                    op: if loaded { 100.0 } else { 40.0 },
                    auto: true,
                }
            })
            .collect()
    }

    #[test]
    fn the_worst_disturbance_is_kept_with_its_surroundings_only_for_the_plot() {
        let setup = LoopSetup::new("TIC-9", Spec::within(600.0));
        let (run, samples) = analyse(rows(), &setup, Some(20.0), true);
        let run = run.unwrap();
        assert_eq!(run.dead_time_s, Some(20.0));
        let r = &run.regulation;
        assert_eq!(r.disturbances.len(), 1, "{:?}", r.disturbances);
        let d = &r.disturbances[0];
        assert_eq!(d.verdict, DisturbanceVerdict::ActuatorLimited);
        assert!((d.start_s - (1_795_392_000.0 + 7_200.0)).abs() < 1.0);
        // 20 min long: 2 min of margin either side (a tenth), so about 24 min of samples.
        let s = samples.unwrap();
        assert!((s.pv.len() as f64 - 1_440.0).abs() <= 2.0, "{}", s.pv.len());
        assert_eq!(s.pv.len(), s.op.len());
        assert_eq!(s.pv[0].0, s_to_ms(d.start_s) - 120_000);
        assert_eq!(analyse(rows(), &setup, None, false).1, None);
        // Too few rows hold nothing.
        assert_eq!(
            analyse(rows()[..2].to_vec(), &setup, None, true),
            (None, None)
        );
    }
}
