//! The demo's plant: the Heron Reach pilot plant, an invented continuous line that makes a fruit
//! syrup base. Pure and deterministic (seeded noise, no clock, no I/O): the same duration gives
//! the same samples every time, so the demo's verdicts can be pinned down by tests.
//!
//! ```text
//!  day tank ─P-101/FV-101 (FIC-101)─> pre-heater E-110 (TIC-110, hot water from T-130) ─>
//!  cook kettle K-120 (TIC-120, electric heater) ─> product cooler E-140 (TIC-140, chilled glycol)
//!  ─> buffer tank T-150 (LIC-150)            hot-water tank T-130 (TIC-130, steam coil)
//! ```
//!
//! Each loop is a process model (one or two lags plus dead time) under a PI controller whose
//! output saturates at the actuator's range, with white measurement noise, run by
//! [`crate::analysis::sim`]. The loops are simulated independently: the kettle's inlet
//! temperature, for example, does not follow the pre-heater's PV. That keeps each loop's story
//! readable; coupling would add disturbances, not insight.
//!
//! The loops and what each one shows, at its setpoint changes and between them (while the
//! setpoint is held):
//!
//! | loop    | what                                 | meant to show                               |
//! |---------|--------------------------------------|---------------------------------------------|
//! | FIC-101 | feed flow, valve FV-101              | a fast process, well tuned; held: low       |
//! |         |                                      | instrument air makes FV-101 stick for 1.8 h |
//! |         |                                      | on the first day (the valve's cycle)        |
//! | TIC-110 | pre-heater outlet, hot-water valve   | a well-tuned loop that meets its spec;      |
//! |         |                                      | held: a retune trial on the first day makes |
//! |         |                                      | it cycle for 1.7 h (the tuning's cycle)     |
//! | TIC-120 | cook kettle, 12 kW electric heater   | the heater saturates: actuator-limited; one |
//! |         |                                      | trial step it can never reach; held: the    |
//! |         |                                      | daily dose of cold dilution water is more   |
//! |         |                                      | than the heater can counter                 |
//! | TIC-130 | hot-water tank, steam valve          | sluggish tuning with headroom to spare      |
//! | TIC-140 | product cooler, chilled-glycol valve | negative-gain process: more OP, lower PV    |
//! | LIC-150 | buffer tank level, inlet valve       | its level transmitter drops out one night   |
//!
//! The loops with no event between changes hold their setpoint against measurement noise alone:
//! neither an oscillation nor a disturbance beyond their actuator. The events (a trial step, a
//! lost transmitter, a retune trial, a dose, a spell of low instrument air) are scheduled in
//! `schedule`; each loop's physics and settings are in `loops`.
//!
//! Physical values are for a pilot line of about 6 L/min (a third of a tonne an hour). Where a
//! value comes from a handbook the comment names it; design choices of this invented plant are
//! marked as such.

mod loops;
mod schedule;

pub use schedule::{load_spells, pv_dropouts, retune_trials, schedule, sticky_spells};

use crate::analysis::sim::{LoopSim, LoopSimConfig, PiController, Stiction};

/// One day in seconds.
pub const DAY_S: f64 = 86_400.0;
const HOUR_S: f64 = 3_600.0;

/// How a loop's signals leave the plant.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Link {
    /// The controller publishes SP, PV and OP on MQTT topics, as JSON batches with time stamps.
    Mqtt,
    /// The controller holds SP, PV and OP in Modbus registers; the monitor polls them.
    Modbus,
}

/// What a loop is meant to show in the demo; the tests check the analysis agrees.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Intent {
    /// Well tuned; meets its spec.
    WellTuned,
    /// Sluggish tuning with actuator headroom: misses are the tuning's.
    SluggishTuning,
    /// The actuator saturates on large steps; one step is beyond its reach.
    ActuatorBound,
    /// Reverse acting (cooling).
    ReverseActing,
    /// A fast process (flow).
    FastProcess,
    /// Its PV transmitter stops reporting for a while.
    StaleSensor,
}

/// One loop of the plant: what the configuration needs to watch it and what the simulator needs
/// to run it.
#[derive(Debug, Clone)]
pub struct LoopDef {
    pub tag: &'static str,
    pub description: &'static str,
    pub pv_unit: &'static str,
    /// The MQTT topic prefix area, e.g. `feed` in `heronreach/feed/FIC-101/pv`.
    pub area: &'static str,
    pub link: Link,
    pub intent: Intent,
    /// How often the controller reports SP, PV and OP (simulated seconds). The Modbus loops are
    /// slow thermal loops reported every 15 s: the demo polls their controller once per 15 s of
    /// plant time, which at 6000× is every 2.5 ms of wall time already; a finer period would
    /// only load the machine, and their time constants of 25 minutes do not need it.
    pub sample_period_s: f64,
    pub settle_band_pct: f64,
    pub settle_within_s: f64,
    pub max_overshoot_pct: Option<f64>,
    pub sim: LoopSimConfig,
    /// Controller settings tried for a while in place of the loop's own ones
    /// ([`retune_trials`] says when).
    pub trial: Option<PiController>,
    /// A load the process meets now and then ([`load_spells`] says when).
    pub load: Option<Load>,
    /// How the loop's valve sticks when it does ([`sticky_spells`] says when).
    pub stiction: Option<Stiction>,
}

/// A load on a loop's process: how far it moves the PV once it has fully arrived with the OP
/// held where it was, and the lag through which it arrives (the process's own, when the load
/// enters where the actuator's effect does).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Load {
    /// PV units; negative for a load that lowers the PV.
    pub size: f64,
    /// First-order lag from the load to the PV (s, > 0).
    pub lag_s: f64,
}

impl LoopDef {
    pub fn op_min(&self) -> f64 {
        self.sim.controller.op_min
    }

    pub fn op_max(&self) -> f64 {
        self.sim.controller.op_max
    }
}

/// The six loops of the Heron Reach pilot plant.
pub fn loops() -> Vec<LoopDef> {
    vec![
        loops::feed_flow(),
        loops::pre_heater(),
        loops::cook_kettle(),
        loops::hot_water_tank(),
        loops::product_cooler(),
        loops::buffer_tank_level(),
    ]
}

/// A valve without stiction: S = J = 0 passes the OP straight through (see
/// [`crate::analysis::sim::StickyValve`]).
const FREE_VALVE: Stiction = Stiction {
    s_pct: 0.0,
    j_pct: 0.0,
};

/// Whether `t_s` lies in one of the windows `[start, end)`.
fn within(windows: &[(f64, f64)], t_s: f64) -> bool {
    windows.iter().any(|&(a, b)| t_s >= a && t_s < b)
}

/// One reported sample of a loop. `pv` is `None` while the PV transmitter is silent.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Reading {
    pub time_s: f64,
    pub sp: f64,
    pub pv: Option<f64>,
    pub op: f64,
}

/// One loop running.
#[derive(Debug, Clone)]
struct Running {
    sim: LoopSim,
    schedule: Vec<(f64, f64)>,
    next_change: usize,
    sp: f64,
    dropouts: Vec<(f64, f64)>,
    /// The loop's own controller settings, and the trial ones with the windows they are in force.
    usual: PiController,
    trial: Option<(PiController, Vec<(f64, f64)>)>,
    /// The load and the windows it is on.
    load: Option<(Load, Vec<(f64, f64)>)>,
    /// How much of the load has reached the PV so far (PV units).
    load_now: f64,
    /// The valve's stiction and the windows it sticks, and whether it sticks now.
    stiction: Option<(Stiction, Vec<(f64, f64)>)>,
    sticking: bool,
    /// Simulation steps per reported sample.
    every: u64,
    steps: u64,
    step_s: f64,
}

impl Running {
    fn new(d: &LoopDef, duration_s: f64) -> Running {
        Running {
            sim: LoopSim::new(d.sim),
            schedule: schedule(d, duration_s),
            next_change: 0,
            sp: d.sim.initial_sp,
            dropouts: pv_dropouts(d, duration_s),
            usual: d.sim.controller,
            trial: d.trial.map(|c| (c, retune_trials(d, duration_s))),
            load: d.load.map(|l| (l, load_spells(d, duration_s))),
            load_now: 0.0,
            stiction: d.stiction.map(|s| (s, sticky_spells(d, duration_s))),
            sticking: false,
            every: (d.sample_period_s / d.sim.step_s).round().max(1.0) as u64,
            steps: 0,
            step_s: d.sim.step_s,
        }
    }

    fn time_s(&self) -> f64 {
        self.steps as f64 * self.step_s
    }

    fn silent(&self) -> bool {
        within(&self.dropouts, self.time_s())
    }

    /// Puts in force, for the next step, what the plant's events say: the transmitter's state,
    /// the controller's settings, the load as far as it has reached the PV through its lag
    /// (exactly, for a load held over the step), and whether the valve sticks.
    fn apply_events(&mut self) {
        let t = self.time_s();
        self.sim.sensor_ok = !self.silent();
        if let Some((trial, windows)) = &self.trial {
            let settings = if within(windows, t) {
                *trial
            } else {
                self.usual
            };
            if self.sim.config().controller != settings {
                self.sim.retune(settings);
            }
        }
        if let Some((load, spells)) = &self.load {
            let target = if within(spells, t) { load.size } else { 0.0 };
            self.load_now += (target - self.load_now) * (1.0 - (-self.step_s / load.lag_s).exp());
            self.sim.disturbance = self.load_now;
        }
        if let Some((stiction, spells)) = &self.stiction {
            let sticks = within(spells, t);
            if sticks != self.sticking {
                // A valve that starts sticking rests where it stands (on the OP, so far); a freed
                // one goes to the OP at once, as a valve does when its air comes back.
                let valve = if sticks { *stiction } else { FREE_VALVE };
                self.sim = self.sim.clone().with_sticky_valve(valve);
                self.sticking = sticks;
            }
        }
    }

    fn reading(&self) -> Reading {
        Reading {
            time_s: self.time_s(),
            sp: self.sp,
            pv: (!self.silent()).then(|| self.sim.pv()),
            op: self.sim.op(),
        }
    }
}

/// The whole plant, advanced in simulated seconds from 0.
#[derive(Debug, Clone)]
pub struct Plant {
    defs: Vec<LoopDef>,
    running: Vec<Running>,
    time_s: f64,
    started: bool,
}

impl Plant {
    /// The plant at steady state at time 0, with schedules for `duration_s` (after which every
    /// setpoint stays where it is).
    pub fn new(duration_s: f64) -> Plant {
        Plant::of(loops(), duration_s)
    }

    /// The plant with the given loops (for tests: the plant's loops changed).
    fn of(defs: Vec<LoopDef>, duration_s: f64) -> Plant {
        let running = defs.iter().map(|d| Running::new(d, duration_s)).collect();
        Plant {
            defs,
            running,
            time_s: 0.0,
            started: false,
        }
    }

    pub fn defs(&self) -> &[LoopDef] {
        &self.defs
    }

    /// Simulated seconds since the start.
    pub fn time_s(&self) -> f64 {
        self.time_s
    }

    /// Advances every loop to `t_s`, calling `report(loop index, reading)` for each sample the
    /// controllers report on the way (their sample instants after the current time up to and
    /// including `t_s`; the first call also reports the samples at time 0).
    pub fn advance_to(&mut self, t_s: f64, report: &mut dyn FnMut(usize, Reading)) {
        if !self.started {
            self.started = true;
            for (i, r) in self.running.iter().enumerate() {
                report(i, r.reading());
            }
        }
        for (i, r) in self.running.iter_mut().enumerate() {
            while r.time_s() + 0.5 * r.step_s <= t_s {
                r.apply_events();
                r.sim.advance(r.sp);
                r.steps += 1;
                let now = r.time_s();
                while r.next_change < r.schedule.len() && r.schedule[r.next_change].0 <= now + 1e-9
                {
                    r.sp = r.schedule[r.next_change].1;
                    r.next_change += 1;
                }
                if r.steps % r.every == 0 {
                    report(i, r.reading());
                }
            }
        }
        self.time_s = self.time_s.max(t_s);
    }

    /// The latest values of a loop (what a controller's registers hold now); PV `None` while
    /// its transmitter is silent.
    pub fn current(&self, index: usize) -> Reading {
        self.running[index].reading()
    }
}

#[cfg(test)]
mod tests;
