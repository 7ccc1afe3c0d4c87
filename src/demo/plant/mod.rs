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
//! The loops and what each one shows:
//!
//! | loop    | what                                    | meant to show                            |
//! |---------|-----------------------------------------|------------------------------------------|
//! | FIC-101 | feed flow, valve FV-101                 | a fast process, well tuned               |
//! | TIC-110 | pre-heater outlet, hot-water valve      | a well-tuned loop that meets its spec    |
//! | TIC-120 | cook kettle, 12 kW electric heater      | the heater saturates: actuator-limited;  |
//! |         |                                         | one trial step it can never reach        |
//! | TIC-130 | hot-water tank, steam valve             | sluggish tuning with headroom to spare   |
//! | TIC-140 | product cooler, chilled-glycol valve    | negative-gain process: more OP, lower PV|
//! | LIC-150 | buffer tank level, inlet valve          | its level transmitter drops out one night|
//!
//! Physical values are for a pilot line of about 6 L/min (a third of a tonne an hour). Where a
//! value comes from a handbook the comment names it; design choices of this invented plant are
//! marked as such.

use crate::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process, Rng};

/// Specific heat of liquid water near 20–80 °C: 4.18 kJ/(kg·K) (CRC Handbook of Chemistry and
/// Physics, properties of water; value from memory). The syrup base is mostly water; its
/// dissolved sugar lowers this by a few per cent, which is ignored.
const CP_WATER_KJ_PER_KG_K: f64 = 4.18;
/// Density of water near 20–80 °C, about 1 kg/L (0.97–1.00; Perry's Chemical Engineers'
/// Handbook, water tables; value from memory).
const WATER_KG_PER_L: f64 = 1.0;
/// Specific heat of austenitic stainless steel (type 304): about 0.50 kJ/(kg·K) (Perry's
/// Chemical Engineers' Handbook, properties of metals; value from memory).
const CP_STEEL_KJ_PER_KG_K: f64 = 0.50;

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
        feed_flow(),
        pre_heater(),
        cook_kettle(),
        hot_water_tank(),
        product_cooler(),
        buffer_tank_level(),
    ]
}

/// FIC-101: feed flow from the day tank, a centrifugal pump P-101 at fixed speed throttled by
/// flow valve FV-101, measured by a magnetic flowmeter.
fn feed_flow() -> LoopDef {
    // Design choice: the valve passes 12 L/min wide open against the pump's head, so the gain is
    // 12 / 100 (L/min)/% (treating the installed characteristic as linear). A valve stroke and
    // the liquid's inertia give a lag of a few seconds (common practice for liquid flow loops);
    // the 1 s dead time is the positioner's.
    let process = Process {
        gain: 0.12,
        time_constant_s: 3.0,
        second_time_constant_s: 0.0,
        dead_time_s: 1.0,
        bias: 0.0,
    };
    LoopDef {
        tag: "FIC-101",
        description: "Feed flow to pre-heater E-110; pump P-101, flow valve FV-101",
        pv_unit: "L/min",
        area: "feed",
        link: Link::Mqtt,
        intent: Intent::FastProcess,
        sample_period_s: 1.0,
        // Flow loops usually carry a looser band than temperatures: ±5 % of the change.
        settle_band_pct: 5.0,
        settle_within_s: 30.0,
        max_overshoot_pct: Some(10.0),
        sim: LoopSimConfig {
            process,
            // Proportional-heavy, fast integral: a typical flow-loop tuning (common practice).
            controller: PiController::on_percent(5.0, 3.5),
            step_s: 0.1,
            // A magnetic flowmeter reads to about ±0.5 % of reading (common practice): σ 0.02 L/min
            // at 6 L/min.
            noise_sd: 0.02,
            seed: 101,
            initial_sp: 6.0,
        },
    }
}

/// TIC-110: product outlet temperature of plate pre-heater E-110, heated with hot water from
/// tank T-130 through valve TV-110.
fn pre_heater() -> LoopDef {
    // Product 6 L/min ≈ 0.1 kg/s, so heating it by 1 K takes 0.1 · 4.18 = 0.42 kW. Design
    // choice: wide open, TV-110 passes enough hot water for about 25 kW, a 60 K rise over the
    // 20 °C feed: gain 0.6 K/%. A plate exchanger's hold-up is small, so its lags are short;
    // the dead time is the transport through the outlet pipe to the sensor.
    let product_kg_s = 6.0 * WATER_KG_PER_L / 60.0;
    let duty_kw = 25.0;
    let rise_k = duty_kw / (product_kg_s * CP_WATER_KJ_PER_KG_K);
    let process = Process {
        gain: rise_k / 100.0,
        time_constant_s: 45.0,
        second_time_constant_s: 10.0,
        dead_time_s: 8.0,
        bias: 20.0,
    };
    LoopDef {
        tag: "TIC-110",
        description: "Pre-heater E-110 product outlet temperature; hot-water valve TV-110",
        pv_unit: "°C",
        area: "preheat",
        link: Link::Mqtt,
        intent: Intent::WellTuned,
        sample_period_s: 2.0,
        settle_band_pct: 2.0,
        settle_within_s: 240.0,
        max_overshoot_pct: Some(10.0),
        sim: LoopSimConfig {
            process,
            // Close to the SIMC rule for this process (Skogestad 2003) with τc = 2θ.
            controller: PiController::on_percent(2.0, 50.0),
            step_s: 0.5,
            // A Pt100 with its transmitter: a few hundredths of a kelvin of noise (common practice).
            noise_sd: 0.03,
            seed: 110,
            initial_sp: 60.0,
        },
    }
}

/// TIC-120: cook kettle K-120, a 150 L stirred kettle with a 12 kW electric immersion heater
/// on a thyristor (OP = % of heater power). The product flows through it continuously.
fn cook_kettle() -> LoopDef {
    // Heat capacity: 150 L of product plus about 80 kg of stainless steel in contact with it.
    // Heat taken away per kelvin: the through-flow (0.1 kg/s · 4.18 = 0.42 kW/K) plus losses
    // through the lagged shell (design choice: 0.03 kW/K). Time constant = capacity / that.
    let capacity_kj_k = 150.0 * WATER_KG_PER_L * CP_WATER_KJ_PER_KG_K + 80.0 * CP_STEEL_KJ_PER_KG_K;
    let removed_kw_k = 6.0 * WATER_KG_PER_L / 60.0 * CP_WATER_KJ_PER_KG_K + 0.03;
    let heater_kw = 12.0;
    let process = Process {
        // 12 kW at 100 % over 0.45 kW/K: a 27 K rise above the 60 °C inlet at most.
        gain: heater_kw / removed_kw_k / 100.0,
        time_constant_s: capacity_kj_k / removed_kw_k,
        // The heater sheath and the thermowell: a second, shorter lag.
        second_time_constant_s: 60.0,
        // Mixing from the heater to the sensor.
        dead_time_s: 30.0,
        bias: 60.0,
    };
    LoopDef {
        tag: "TIC-120",
        description: "Cook kettle K-120 temperature; 12 kW electric heater EH-120 (thyristor)",
        pv_unit: "°C",
        area: "cook",
        link: Link::Modbus,
        intent: Intent::ActuatorBound,
        sample_period_s: 15.0,
        settle_band_pct: 2.0,
        settle_within_s: 1_200.0,
        max_overshoot_pct: Some(10.0),
        sim: LoopSimConfig {
            process,
            // Tuned well: among the fastest settings for setpoint changes on this process
            // with this heater (found by simulating the loop), so the misses this loop has are
            // the heater's, not the controller's.
            controller: PiController::on_percent(60.0, 280.0),
            step_s: 1.0,
            noise_sd: 0.02,
            seed: 120,
            initial_sp: 72.0,
        },
    }
}

/// TIC-130: hot-water tank T-130 (300 L) that feeds the pre-heater, heated by a steam coil
/// through valve TV-130. Its PI settings are the cautious ones left from commissioning.
fn hot_water_tank() -> LoopDef {
    // 300 L of water; the hot-water circuit returns from E-110 at about 40 °C and the tank
    // loses to it about 0.8 kW/K (design choice). Time constant = 300 · 4.18 / 0.8 ≈ 26 min.
    // Design choice: the coil delivers 60 kW with the steam valve wide open, a 75 K rise at
    // most: gain 0.75 K/%.
    let capacity_kj_k = 300.0 * WATER_KG_PER_L * CP_WATER_KJ_PER_KG_K;
    let removed_kw_k = 0.8;
    let process = Process {
        gain: 60.0 / removed_kw_k / 100.0,
        time_constant_s: capacity_kj_k / removed_kw_k,
        // The coil's own heat-up and the tank's mixing.
        second_time_constant_s: 90.0,
        dead_time_s: 45.0,
        bias: 40.0,
    };
    LoopDef {
        tag: "TIC-130",
        description: "Hot-water tank T-130 temperature; steam valve TV-130",
        pv_unit: "°C",
        area: "utilities",
        link: Link::Modbus,
        intent: Intent::SluggishTuning,
        sample_period_s: 15.0,
        settle_band_pct: 2.0,
        settle_within_s: 2_400.0,
        max_overshoot_pct: Some(10.0),
        sim: LoopSimConfig {
            process,
            // Far below what the process allows (SIMC would give Kc ≈ 13 %/K, τI ≈ 540 s).
            controller: PiController::on_percent(1.5, 1_800.0),
            step_s: 1.0,
            noise_sd: 0.03,
            seed: 130,
            initial_sp: 80.0,
        },
    }
}

/// TIC-140: product outlet of plate cooler E-140, cooled with chilled glycol through valve
/// TV-140. Reverse acting: opening the valve lowers the temperature.
fn product_cooler() -> LoopDef {
    // Product arrives at about 70 °C; design choice: the glycol valve wide open takes 0.1 kg/s
    // of product down by 60 K (25 kW of cooling): gain −0.6 K/%.
    let process = Process {
        gain: -0.6,
        time_constant_s: 90.0,
        second_time_constant_s: 15.0,
        dead_time_s: 12.0,
        bias: 70.0,
    };
    LoopDef {
        tag: "TIC-140",
        description: "Product cooler E-140 outlet temperature; chilled-glycol valve TV-140 (negative-gain process)",
        pv_unit: "°C",
        area: "cool",
        link: Link::Mqtt,
        intent: Intent::ReverseActing,
        sample_period_s: 2.0,
        settle_band_pct: 2.0,
        settle_within_s: 420.0,
        max_overshoot_pct: Some(15.0),
        sim: LoopSimConfig {
            process,
            // Negative gain: the controller's sign matches the process's.
            controller: PiController::on_percent(-2.0, 100.0),
            step_s: 0.5,
            noise_sd: 0.03,
            seed: 140,
            initial_sp: 28.0,
        },
    }
}

/// LIC-150: level of buffer tank T-150 (0.1 m² cross-section, about 0.36 m across; 1 m
/// level span), filled through inlet valve LV-150 and drained by gravity through a fixed
/// orifice.
fn buffer_tank_level() -> LoopDef {
    // Gravity outflow grows with the square root of the level (Torricelli), which makes the
    // level self-regulating. Linearised at 0.5 m and 10 L/min (design choices): time constant
    // 2·A·h/q = 2 · 0.1 m² · 0.5 m / (10 L/min) = 600 s; gain 2h/q = 0.1 m per L/min, and the
    // valve passes 20 L/min wide open (0.2 L/min per %), so 0.02 m/% = 2 % of span per %.
    let area_m2 = 0.1;
    let level_m = 0.5;
    let flow_l_min = 10.0;
    let valve_l_min_per_pct = 20.0 / 100.0;
    let m_per_l_min = 2.0 * level_m / flow_l_min;
    let gain = m_per_l_min * valve_l_min_per_pct * 100.0;
    let process = Process {
        gain,
        time_constant_s: 2.0 * area_m2 * level_m / (flow_l_min / 1000.0 / 60.0),
        second_time_constant_s: 0.0,
        dead_time_s: 5.0,
        // The linear model's intercept, chosen so that 50 % open holds 50 %; the model is only
        // used near that point.
        bias: 50.0 - gain * flow_l_min / valve_l_min_per_pct,
    };
    LoopDef {
        tag: "LIC-150",
        description: "Buffer tank T-150 level; inlet valve LV-150 (transmitter LT-150)",
        pv_unit: "%",
        area: "buffer",
        link: Link::Mqtt,
        intent: Intent::StaleSensor,
        sample_period_s: 5.0,
        // Level loops absorb flow changes; their specs are loose and set no overshoot limit.
        settle_band_pct: 5.0,
        settle_within_s: 1_200.0,
        max_overshoot_pct: None,
        sim: LoopSimConfig {
            process,
            controller: PiController::on_percent(3.0, 600.0),
            step_s: 1.0,
            // A radar level transmitter: about ±1 mm (common practice), 0.1 % of span.
            noise_sd: 0.1,
            seed: 150,
            initial_sp: 50.0,
        },
    }
}

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
        // Small trims are within the heater's means; the recipes' large rises are not.
        "TIC-120" => &[
            (1.0, 81.0),
            (4.0, 76.0),
            (6.5, 83.0),
            (9.5, 76.0),
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
const TRIAL_STEP: (f64, f64) = (12.0, 88.0);

/// From 19.5 h to 27.5 h after the start, LT-150's signal is lost (a loose connector, found by
/// the next shift).
const DROPOUT: (f64, f64) = (19.5 * HOUR_S, 27.5 * HOUR_S);

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
    if def.intent == Intent::StaleSensor && DROPOUT.0 < duration_s {
        vec![(DROPOUT.0, DROPOUT.1.min(duration_s))]
    } else {
        Vec::new()
    }
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
    /// Simulation steps per reported sample.
    every: u64,
    steps: u64,
    step_s: f64,
}

impl Running {
    fn time_s(&self) -> f64 {
        self.steps as f64 * self.step_s
    }

    fn silent(&self) -> bool {
        let t = self.time_s();
        self.dropouts.iter().any(|&(a, b)| t >= a && t < b)
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
        let defs = loops();
        let running = defs
            .iter()
            .map(|d| {
                let every = (d.sample_period_s / d.sim.step_s).round().max(1.0) as u64;
                Running {
                    sim: LoopSim::new(d.sim),
                    schedule: schedule(d, duration_s),
                    next_change: 0,
                    sp: d.sim.initial_sp,
                    dropouts: pv_dropouts(d, duration_s),
                    every,
                    steps: 0,
                    step_s: d.sim.step_s,
                }
            })
            .collect();
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
                r.sim.sensor_ok = !r.silent();
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
mod tests {
    use super::*;
    use crate::analysis::assess::Action;
    use crate::analysis::{self, AnalysisOptions, LoopSetup, OpRange, Series, Spec, Verdict};

    /// Each loop's readings over `duration_s`, as analysis series (PV gaps left out).
    fn record(duration_s: f64) -> Vec<(LoopDef, Series)> {
        let mut plant = Plant::new(duration_s);
        let mut rows: Vec<Vec<Reading>> = vec![Vec::new(); plant.defs().len()];
        plant.advance_to(duration_s, &mut |i, r| rows[i].push(r));
        plant
            .defs()
            .iter()
            .cloned()
            .zip(rows)
            .map(|(d, rows)| {
                let rows: Vec<&Reading> = rows.iter().filter(|r| r.pv.is_some()).collect();
                let series = Series::new(
                    rows.iter().map(|r| r.time_s).collect(),
                    rows.iter().map(|r| r.sp).collect(),
                    rows.iter().map(|r| r.pv.unwrap_or(f64::NAN)).collect(),
                    rows.iter().map(|r| r.op).collect(),
                    None,
                )
                .expect("a valid series");
                (d, series)
            })
            .collect()
    }

    fn setup(d: &LoopDef) -> LoopSetup {
        LoopSetup {
            units: crate::analysis::Units {
                pv: d.pv_unit.into(),
                op: crate::analysis::Units::DEFAULT_OP.into(),
            },
            controller: None,
            actuator: None,
            tag: d.tag.into(),
            op: OpRange {
                min: d.op_min(),
                max: d.op_max(),
            },
            spec: Spec {
                settle_band_pct: d.settle_band_pct,
                settle_band: None,
                settle_within_s: d.settle_within_s,
                max_overshoot_pct: d.max_overshoot_pct,
                hold_band: None,
                recover_within_s: None,
            },
            options: AnalysisOptions {
                expected_period_s: Some(d.sample_period_s),
                ..AnalysisOptions::default()
            },
        }
    }

    #[test]
    fn the_same_duration_gives_the_same_samples() {
        let a = record(6.0 * HOUR_S);
        let b = record(6.0 * HOUR_S);
        for ((_, x), (_, y)) in a.iter().zip(&b) {
            assert_eq!(x.pv(), y.pv());
            assert_eq!(x.op(), y.op());
        }
    }

    #[test]
    fn advancing_in_small_steps_reports_what_one_big_step_does() {
        let mut whole = Plant::new(DAY_S);
        let mut one: Vec<(usize, Reading)> = Vec::new();
        whole.advance_to(3.0 * HOUR_S, &mut |i, r| one.push((i, r)));
        let mut parts = Plant::new(DAY_S);
        let mut many: Vec<(usize, Reading)> = Vec::new();
        let mut t = 0.0;
        while t < 3.0 * HOUR_S {
            t = (t + 37.0f64).min(3.0 * HOUR_S);
            parts.advance_to(t, &mut |i, r| many.push((i, r)));
        }
        one.sort_by(|a, b| (a.0, a.1.time_s).partial_cmp(&(b.0, b.1.time_s)).unwrap());
        many.sort_by(|a, b| (a.0, a.1.time_s).partial_cmp(&(b.0, b.1.time_s)).unwrap());
        assert_eq!(one, many);
    }

    #[test]
    fn the_level_transmitter_is_silent_on_the_first_night_only() {
        let d = buffer_tank_level();
        assert_eq!(pv_dropouts(&d, 7.0 * DAY_S), vec![DROPOUT]);
        assert!(pv_dropouts(&pre_heater(), 7.0 * DAY_S).is_empty());
        let mut plant = Plant::new(2.0 * DAY_S);
        let level = plant
            .defs()
            .iter()
            .position(|d| d.tag == "LIC-150")
            .unwrap();
        let mut silent = Vec::new();
        plant.advance_to(2.0 * DAY_S, &mut |i, r| {
            if i == level && r.pv.is_none() {
                silent.push(r.time_s);
            }
        });
        assert_eq!(silent.first().copied(), Some(DROPOUT.0));
        assert_eq!(silent.last().copied(), Some(DROPOUT.1 - 5.0));
    }

    #[test]
    fn every_value_is_inside_its_physical_range() {
        for (d, s) in record(DAY_S) {
            assert!(
                s.op()
                    .iter()
                    .all(|&u| (d.op_min()..=d.op_max()).contains(&u)),
                "{}",
                d.tag
            );
            assert!(s.pv().iter().all(|v| v.is_finite()), "{}", d.tag);
        }
    }

    /// The scenario's intent, judged by the offline analysis on two days of each loop (the
    /// demo's test checks the same through the daemon).
    #[test]
    fn the_analysis_sees_what_each_loop_is_meant_to_show() {
        for (d, series) in record(2.0 * DAY_S) {
            let report = analysis::analyze_loop(&series, &setup(&d));
            let c = report.counts;
            eprintln!(
                "{}: {:?} model {:?} — {}",
                d.tag, c, report.model, report.recommendation.summary
            );
            for e in &report.episodes {
                eprintln!(
                    "   {:>7.0} {:>6.1} → {:>6.1} settled {:?} t* {:?} os {:.1} {:?}",
                    e.start_s,
                    e.sp_from,
                    e.sp_to,
                    e.settling_time_s.map(|x| x.round()),
                    e.min_settling_time_s.map(|x| x.round()),
                    e.overshoot_pct,
                    e.verdict
                );
            }
            assert!(report.episodes.len() >= 5, "{}: too few episodes", d.tag);
            match d.intent {
                Intent::WellTuned | Intent::FastProcess | Intent::ReverseActing => {
                    assert!(
                        c.met > 0 && c.tuning_limited + c.actuator_limited <= c.met / 4,
                        "{}: {c:?}",
                        d.tag
                    );
                }
                Intent::SluggishTuning => {
                    assert!(
                        c.tuning_limited > 0 && c.met + c.actuator_limited < c.tuning_limited,
                        "{}: {c:?}",
                        d.tag
                    );
                    assert_eq!(report.recommendation.action, Action::Retune);
                }
                Intent::ActuatorBound => {
                    assert!(
                        c.actuator_limited > 0 && c.unreachable > 0,
                        "{}: {c:?}",
                        d.tag
                    );
                    assert!(c.tuning_limited < c.actuator_limited, "{}: {c:?}", d.tag);
                    assert!(matches!(
                        report.recommendation.action,
                        Action::Upgrade | Action::Renegotiate
                    ));
                    let trial = report
                        .episodes
                        .iter()
                        .find(|e| e.sp_to == TRIAL_STEP.1)
                        .expect("the trial step");
                    assert_eq!(trial.verdict, Verdict::Unreachable);
                }
                Intent::StaleSensor => {
                    assert!(c.met > 0, "{}: {c:?}", d.tag);
                }
            }
        }
    }
}
