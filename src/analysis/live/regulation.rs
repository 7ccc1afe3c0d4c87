//! Regulation watched live: the same core as the offline analysis
//! ([`crate::analysis::regulation`]) run on the holds in the tracker's buffer, turned into
//! events a person is alerted to — an oscillation while it lasts, and each load disturbance the
//! actuator could not counter.
//!
//! The buffer holds at least a quarter of the evaluation horizon (2.5 spec times by default), so
//! live the oscillation test sees cycles whose period is up to about a fifth of that (Hägglund's
//! test needs more than ten large half-cycles); `analyze` and the weekly summary see all of the
//! data.

use crate::analysis::assess;
use crate::analysis::identify::Model;
use crate::analysis::regulation::{
    self, Busy, Disturbance, DisturbanceVerdict, Hold, HoldEnd, Oscillation,
};
use crate::analysis::segment::Segmentation;
use crate::analysis::segment::WindowEnd;
use crate::analysis::{LoopSetup, Series, segment::SegmentSettings};
use std::collections::VecDeque;

/// What the regulation watch found.
#[derive(Debug, Clone, PartialEq)]
pub enum RegulationEvent {
    /// An oscillation is present in the recent holds (reported when first found).
    Oscillating(Oscillation),
    /// The oscillation reported before is gone: the recent holds, covering at least half the
    /// buffer, show none. `at_s` is the newest data time.
    OscillationGone { at_s: f64 },
    /// A disturbance with the OP at its limit for much of it: `ongoing` while the PV is still
    /// out, then once more when it is over. `id_start_s` is its start as first reported, which
    /// names it even after the buffer has dropped its beginning.
    ActuatorLimited {
        disturbance: Disturbance,
        ongoing: bool,
        id_start_s: f64,
    },
}

/// The regulation state of one loop between evaluations.
#[derive(Debug, Clone, Default)]
pub struct RegulationWatch {
    /// Data time of the last regulation evaluation.
    evaluated_to: Option<f64>,
    oscillating: bool,
    /// The actuator-limited disturbance reported as ongoing: its first reported start, and how
    /// it looked last.
    open: Option<(f64, Disturbance)>,
    /// How long each closed setpoint change in the buffer kept the loop busy.
    closed: VecDeque<Busy>,
    /// The end of the newest actuator-limited disturbance reported as over.
    done_to: Option<f64>,
}

/// A disturbance counts as over once the PV has been back inside this long (s), matching the
/// core's rule for recovery.
const SETTLED_INSIDE_S: f64 = 60.0;

impl RegulationWatch {
    /// The data time between regulation evaluations: a tenth of the spec time, at least a
    /// minute (the core's recovery rule needs a minute inside to call a disturbance over).
    fn interval(setup: &LoopSetup) -> f64 {
        (0.1 * setup.spec.settle_within_s).max(SETTLED_INSIDE_S)
    }

    /// The holds of the buffered `series`. A closed window keeps the loop busy as long as it
    /// did when first scored, so its change is scored once, not at every evaluation.
    fn holds(
        &mut self,
        series: &Series,
        seg: &Segmentation,
        settings: &SegmentSettings,
        setup: &LoopSetup,
    ) -> Vec<Hold> {
        let t = series.time_s();
        let busy: Vec<Busy> = seg
            .windows
            .iter()
            .map(|w| {
                if let Some(b) = self.closed.iter().find(|b| b.from_s == t[w.start]) {
                    return *b;
                }
                let scored = assess::score_window(series, w, setup);
                let b = assess::busy_of(series, w, scored.as_ref());
                if w.end_reason != WindowEnd::EndOfData {
                    self.closed.push_back(b);
                }
                b
            })
            .collect();
        // Changes whose response ended before the buffer starts are needed no more.
        self.closed.retain(|b| b.until_s >= t[0]);
        regulation::holds(series, &busy, settings.max_gap_s, settings.deadband)
    }

    /// Runs the regulation core on the holds of the buffered `series` and reports what changed.
    pub fn evaluate(
        &mut self,
        series: &Series,
        seg: &Segmentation,
        settings: &SegmentSettings,
        setup: &LoopSetup,
        model: Option<&Model>,
    ) -> Vec<RegulationEvent> {
        let mut events = Vec::new();
        let t = series.time_s();
        let Some(&newest) = t.last() else {
            return events;
        };
        if self
            .evaluated_to
            .is_some_and(|e| newest - e < Self::interval(setup))
        {
            return events;
        }
        self.evaluated_to = Some(newest);
        let holds = self.holds(series, seg, settings, setup);
        let found =
            regulation::regulation(series, &holds, &assess::regulation_settings(setup, model));
        let held_s = found.hold_hours * 3600.0;
        let span = newest - t[0];
        if found.oscillation.detected && !self.oscillating {
            self.oscillating = true;
            events.push(RegulationEvent::Oscillating(found.oscillation.clone()));
        } else if !found.oscillation.detected && self.oscillating && held_s >= 0.5 * span {
            self.oscillating = false;
            events.push(RegulationEvent::OscillationGone { at_s: newest });
        }
        let open_hold = holds
            .last()
            .filter(|h| h.end_reason == HoldEnd::EndOfData)
            .map(|h| t[h.start]);
        // Still going when it reaches the newest data and the PV is not yet back inside for a
        // minute, in a hold that has not ended.
        let ongoing = |d: &Disturbance| {
            open_hold.is_some_and(|from| d.start_s >= from) && d.end_s > newest - SETTLED_INSIDE_S
        };
        let mut refreshed = false;
        for d in &found.disturbances {
            // One that started before the last reported one ended is that one seen again (the
            // buffer has dropped its beginning): it was reported.
            if d.verdict != DisturbanceVerdict::ActuatorLimited
                || self.done_to.is_some_and(|e| d.start_s <= e)
            {
                continue;
            }
            // The first one not yet over is the one reported as open, if there is one.
            let id_start_s = self.open.as_ref().map_or(d.start_s, |o| o.0);
            let still = ongoing(d);
            if still {
                self.open = Some((id_start_s, d.clone()));
                refreshed = true;
            } else {
                self.open = None;
                self.done_to = Some(d.end_s);
            }
            events.push(RegulationEvent::ActuatorLimited {
                disturbance: d.clone(),
                ongoing: still,
                id_start_s,
            });
        }
        // An open one no longer seen as actuator-limited: the buffer has dropped its beginning
        // and what is left of it (if anything) no longer has the OP at its limit. It is over
        // where that rest ends.
        if !refreshed && let Some((id_start_s, mut last)) = self.open.take() {
            // What is left of it: the first disturbance still out at or after its last known end
            // (the buffer may have cut it where the PV briefly touched the band).
            if let Some(rest) = found.disturbances.iter().find(|d| d.end_s >= last.end_s) {
                if ongoing(rest) {
                    self.open = Some((id_start_s, last));
                    return events;
                }
                last.end_s = rest.end_s;
                last.recovery_time_s = rest.recovery_time_s.map(|_| rest.end_s - id_start_s);
                last.verdict = DisturbanceVerdict::ActuatorLimited;
            }
            self.done_to = Some(last.end_s);
            events.push(RegulationEvent::ActuatorLimited {
                disturbance: last,
                ongoing: false,
                id_start_s,
            });
        }
        events
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::live::{LiveEvent, LoopTracker, Row};
    use crate::analysis::sim::{LoopSim, LoopSimConfig, PiController};
    use crate::analysis::{OpRange, Spec};

    /// The jacketed vessel held at 50 °C (OP 37.5 % of a 0–60 % valve), its setup with a 10 min
    /// spec (the tracker keeps at least 25 min of rows).
    fn setup() -> LoopSetup {
        let mut s = LoopSetup::new("TIC-1", Spec::within(600.0));
        s.op = OpRange {
            min: 0.0,
            max: 60.0,
        };
        s.options.expected_period_s = Some(2.0);
        s
    }

    /// Runs `sim` from `from_s` to `to_s` at a held SP of 50, with the load `load(t)` added to
    /// the PV, sampling every 2 s.
    fn run(sim: &mut LoopSim, rows: &mut Vec<Row>, to_s: f64, load: impl Fn(f64) -> f64) {
        let step = sim.config().step_s;
        let every = (2.0 / step).round() as u64;
        let mut k = 0u64;
        while sim.time_s() < to_s {
            sim.disturbance = load(sim.time_s());
            if k.is_multiple_of(every) {
                rows.push(Row {
                    time_s: sim.time_s(),
                    sp: 50.0,
                    pv: sim.pv(),
                    op: sim.op(),
                    auto: true,
                });
            }
            sim.advance(50.0);
            k += 1;
        }
    }

    fn watch(rows: &[Row]) -> Vec<RegulationEvent> {
        let mut tracker = LoopTracker::new(setup());
        let mut out = Vec::new();
        for chunk in rows.chunks(30) {
            tracker.extend(chunk);
            out.extend(tracker.evaluate().into_iter().filter_map(|e| match e {
                LiveEvent::Regulation(r) => Some(r),
                _ => None,
            }));
        }
        out
    }

    #[test]
    fn a_load_beyond_the_valve_is_followed_while_it_lasts_and_reported_once_over() {
        // From 3000 s to 6000 s a load of −25 °C needs the valve at 68.75 % to hold 50 °C: it
        // sits at 60 % and the PV at 68 − 25 = 43 °C. From 8000 s a −2 °C load, which the valve
        // counters (40 %, its first kick of 12.5 % staying clear of the limit), raises nothing. The load lasts longer than the buffer, so the same
        // disturbance must keep its first start as its name.
        let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 7));
        let mut rows = Vec::new();
        run(&mut sim, &mut rows, 12_000.0, |t| {
            if (3000.0..6000.0).contains(&t) {
                -25.0
            } else if t >= 8000.0 {
                -2.0
            } else {
                0.0
            }
        });
        let events = watch(&rows);
        let limited: Vec<(f64, bool, f64)> = events
            .iter()
            .filter_map(|e| match e {
                RegulationEvent::ActuatorLimited {
                    disturbance,
                    ongoing,
                    id_start_s,
                } => Some((*id_start_s, *ongoing, disturbance.end_s)),
                _ => None,
            })
            .collect();
        assert!(limited.len() >= 2, "{limited:?}");
        let id = limited[0].0;
        assert!((3000.0..3100.0).contains(&id), "{limited:?}");
        assert!(limited.iter().all(|l| l.0 == id), "one name: {limited:?}");
        let (last, ongoing) = (limited.last().unwrap(), &limited[..limited.len() - 1]);
        assert!(ongoing.iter().all(|l| l.1), "{limited:?}");
        assert!(!last.1, "reported over once: {limited:?}");
        assert!((6000.0..7500.0).contains(&last.2), "{limited:?}");
        assert!(
            !events
                .iter()
                .any(|e| matches!(e, RegulationEvent::Oscillating(_))),
            "{events:?}"
        );
    }

    #[test]
    fn an_oscillation_is_reported_when_found_and_when_gone() {
        // Kc 20 %/°C is about the ultimate gain of this vessel (K 0.8 °C/%, τ 300 s, θ 30 s:
        // ω_u ≈ 0.055 rad/s, |G(jω_u)| ≈ 0.8/16.5): the loop cycles with a period near 2 min,
        // bounded by the valve's limits. Then the usual tuning takes over and it calms down.
        let mut cycling = LoopSimConfig::jacketed_vessel(60.0, 9);
        cycling.controller = PiController {
            gain: 20.0,
            integral_time_s: 240.0,
            op_min: 0.0,
            op_max: 60.0,
        };
        let mut sim = LoopSim::new(cycling);
        let mut rows = Vec::new();
        run(&mut sim, &mut rows, 4000.0, |t| {
            if t > 100.0 { -1.0 } else { 0.0 }
        });
        let mut calm = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 10));
        let mut later = Vec::new();
        run(&mut calm, &mut later, 5000.0, |_| 0.0);
        rows.extend(later.into_iter().map(|r| Row {
            time_s: r.time_s + 4002.0,
            ..r
        }));
        let events = watch(&rows);
        let found: Vec<&RegulationEvent> = events
            .iter()
            .filter(|e| !matches!(e, RegulationEvent::ActuatorLimited { .. }))
            .collect();
        assert_eq!(found.len(), 2, "{found:?}");
        let RegulationEvent::Oscillating(o) = found[0] else {
            panic!("{found:?}")
        };
        let period = o.period_s.unwrap();
        assert!((80.0..200.0).contains(&period), "{o:?}");
        let RegulationEvent::OscillationGone { at_s } = found[1] else {
            panic!("{found:?}")
        };
        assert!(*at_s > 4002.0, "{found:?}");
    }
}
