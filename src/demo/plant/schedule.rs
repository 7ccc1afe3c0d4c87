//! What happens to the plant over time: each loop's setpoint changes, and the events of the
//! demo's story (a trial step, a lost transmitter, a retune trial, a dose of cold water, a valve
//! that sticks).

use super::{DAY_S, HOUR_S, Intent, LoopDef};
use crate::analysis::sim::Rng;

/// A loop's setpoint changes over a day: (hour of the day, counted from the start of the run,
/// new setpoint).
fn daily_setpoints(tag: &str) -> &'static [(f64, f64)] {
    match tag {
        // The feed rate follows the production plan, a change every two to three hours.
        "FIC-101" => &[
            (0.5, 7.5),
            (2.5, 6.0),
            (5.0, 8.0),
            (7.5, 6.5),
            (10.0, 8.5),
            (12.5, 7.0),
            (15.0, 5.0),
            (17.5, 6.5),
            (20.0, 4.5),
            (22.5, 6.0),
        ],
        // Recipes ask for different pre-heat temperatures.
        "TIC-110" => &[
            (1.0, 63.0),
            (4.0, 58.0),
            (7.0, 65.0),
            (10.0, 60.0),
            (13.0, 64.0),
            (16.0, 57.0),
            (19.0, 62.0),
            (22.0, 60.0),
        ],
        // Small trims are within the heater's means; the recipes' large rises are not. The
        // 83 °C recipe is the day's long one, six hours (see `DOSED_RECIPE_C`).
        "TIC-120" => &[
            (1.0, 81.0),
            (4.0, 76.0),
            (6.0, 83.0),
            (12.0, 74.0),
            (14.5, 72.0),
            (17.0, 81.0),
            (20.0, 74.0),
            (22.5, 72.0),
        ],
        // The hot-water tank follows the day's recipes a few kelvin up or down.
        "TIC-130" => &[
            (1.0, 84.0),
            (5.0, 79.0),
            (9.0, 83.0),
            (13.0, 77.0),
            (17.0, 82.0),
            (21.0, 80.0),
        ],
        "TIC-140" => &[
            (1.5, 25.0),
            (4.5, 30.0),
            (7.5, 26.0),
            (10.5, 32.0),
            (13.5, 27.0),
            (16.5, 31.0),
            (19.5, 25.0),
            (22.5, 28.0),
        ],
        "LIC-150" => &[
            (2.0, 60.0),
            (6.0, 45.0),
            (10.0, 55.0),
            (14.0, 40.0),
            (18.0, 50.0),
        ],
        _ => &[],
    }
}

/// On the first day (hours here count from the start of the run), a trial recipe asks the
/// kettle for 88 °C: more than the heater can hold with the product flowing through (it tops
/// out near 87 °C), so the PV can never settle there. It replaces the 12 h step to 74 °C and
/// lasts until the 14.5 h step.
pub(super) const TRIAL_STEP: (f64, f64) = (12.0, 88.0);

/// From 19.5 h to 27.5 h after the start, LT-150's signal is lost (a loose connector, found by
/// the next shift).
pub(super) const DROPOUT: (f64, f64) = (19.5 * HOUR_S, 27.5 * HOUR_S);

/// On the first day, from 5.0 h to 6.7 h after the start, a loop with trial settings runs on
/// them: for TIC-110 an engineer tries a tighter tuning during the hold after the 4 h recipe
/// change and puts the old settings back before the 7 h change (design choices of this invented
/// plant). The trial starts after the 4 h change's window has closed (at most 4.25 h + 40 min,
/// ten spec times) and ends before the 7 h change (at least 6.75 h): it spans no setpoint
/// change's window, so it shows in the holds only and leaves every change's verdict as it was.
pub(super) const RETUNE_TRIAL: (f64, f64) = (5.0 * HOUR_S, 6.7 * HOUR_S);

/// On the first day, from 12.9 h to 14.7 h after the start, the instrument air to FV-101's
/// actuator runs low (a compressor trips and the standby one does not start; design choices of
/// this invented plant): with less thrust to overcome the packing's friction, the valve sticks
/// until the air supply is restored. The spell lies between the 12.5 h change's window (at most
/// 12.75 h + 5 min) and the 15 h change (at least 14.75 h): like the retune trial, it shows in
/// the holds only.
pub(super) const LOW_AIR: (f64, f64) = (12.9 * HOUR_S, 14.7 * HOUR_S);

/// The kettle's long recipe at this setpoint (°C) is brought to its sugar content with dilution
/// water dosed straight into the kettle, `DOSE_AFTER_S` after the setpoint change for
/// `DOSE_FOR_S`, every day it runs (design choices of this invented plant). The dose comes
/// after the change's window has closed (ten spec times, 3 h 20 min), so the analysis sees it
/// in the hold that follows the settled change, as a load disturbance, not as part of the
/// change's response; and it is over, the PV recovered, well before the next change.
pub(super) const DOSED_RECIPE_C: f64 = 83.0;
const DOSE_AFTER_S: f64 = 3.75 * HOUR_S;
const DOSE_FOR_S: f64 = 0.75 * HOUR_S;

/// A loop's setpoint schedule over `duration_s`: (time s, setpoint), in time order. Each day's
/// changes move by up to ±15 minutes from the daily plan, by a seeded draw, so no two days are
/// alike.
pub fn schedule(def: &LoopDef, duration_s: f64) -> Vec<(f64, f64)> {
    let mut rng = Rng::new(def.sim.seed ^ 0x5EED);
    let days = (duration_s / DAY_S).ceil().max(1.0) as usize;
    let mut out = Vec::new();
    for day in 0..days {
        for &(hour, sp) in daily_setpoints(def.tag) {
            let jitter = (rng.uniform() - 0.5) * 0.5 * HOUR_S;
            let mut sp = sp;
            if day == 0 && def.intent == Intent::ActuatorBound && hour == TRIAL_STEP.0 {
                sp = TRIAL_STEP.1;
            }
            let t = (day as f64 * DAY_S + hour * HOUR_S + jitter).round();
            if t > 0.0 && t < duration_s {
                out.push((t, sp));
            }
        }
    }
    out
}

/// The windows (start s, end s) in which a loop's PV transmitter reports nothing.
pub fn pv_dropouts(def: &LoopDef, duration_s: f64) -> Vec<(f64, f64)> {
    once(def.intent == Intent::StaleSensor, DROPOUT, duration_s)
}

/// The windows (start s, end s) in which a loop runs on its trial settings.
pub fn retune_trials(def: &LoopDef, duration_s: f64) -> Vec<(f64, f64)> {
    once(def.trial.is_some(), RETUNE_TRIAL, duration_s)
}

/// The windows (start s, end s) in which a loop's valve sticks.
pub fn sticky_spells(def: &LoopDef, duration_s: f64) -> Vec<(f64, f64)> {
    once(def.stiction.is_some(), LOW_AIR, duration_s)
}

/// The windows (start s, end s) in which a loop's load is on: for the kettle, the dilution
/// water of each run of its dosed recipe.
pub fn load_spells(def: &LoopDef, duration_s: f64) -> Vec<(f64, f64)> {
    if def.load.is_none() {
        return Vec::new();
    }
    schedule(def, duration_s)
        .into_iter()
        .filter(|&(_, sp)| sp == DOSED_RECIPE_C)
        .map(|(t, _)| {
            (
                t + DOSE_AFTER_S,
                (t + DOSE_AFTER_S + DOSE_FOR_S).min(duration_s),
            )
        })
        .filter(|(from, to)| from < to)
        .collect()
}

/// `window`, cut at `duration_s`, when `applies` and it starts before then.
fn once(applies: bool, window: (f64, f64), duration_s: f64) -> Vec<(f64, f64)> {
    if applies && window.0 < duration_s {
        vec![(window.0, window.1.min(duration_s))]
    } else {
        Vec::new()
    }
}
