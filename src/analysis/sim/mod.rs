//! A small, deterministic loop simulator: a process of one of the design's model families (one or
//! two first-order lags, integrating, direction-dependent, through an equal-percentage valve; each
//! plus dead time, see [`Dynamics`]) under a PI controller whose output saturates at the actuator
//! limits.
//!
//! The analysis uses it to predict how a suggested PI tuning would respond on the identified
//! model; tests use it to build corpora with a known truth; the demo uses it as the plant. It is
//! pure (seeded noise, no clock) so the same inputs always give the same samples.

use super::Series;
use std::collections::VecDeque;

mod dynamics;
mod stiction;

pub use dynamics::{Dynamics, IntegratingProcess, TwoDirectionProcess, ValveProcess};
pub use stiction::{StickyValve, Stiction};

/// A process: `PV = bias + x`, where `x` follows `K·u(t − θ)` through one or two first-order lags.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Process {
    /// Steady-state gain K, PV units per OP unit. Negative for a negative-gain process (cooling).
    pub gain: f64,
    /// Dominant time constant τ₁ in seconds (> 0).
    pub time_constant_s: f64,
    /// Second time constant τ₂ in seconds; 0 for a first-order process.
    pub second_time_constant_s: f64,
    /// Dead time θ in seconds (≥ 0).
    pub dead_time_s: f64,
    /// PV when the OP is zero at steady state (ambient temperature, for example).
    pub bias: f64,
}

impl Process {
    /// The jacketed vessel the examples, tests and bench use: K = 0.8 °C/% of steam valve,
    /// τ = 300 s, θ = 30 s, ambient 20 °C (invented; with the valve at 60 % the PV can reach at
    /// most 20 + 0.8 · 60 = 68 °C).
    pub const JACKETED_VESSEL: Process = Process {
        gain: 0.8,
        time_constant_s: 300.0,
        second_time_constant_s: 0.0,
        dead_time_s: 30.0,
        bias: 20.0,
    };
}

impl LoopSimConfig {
    /// [`Process::JACKETED_VESSEL`] under a PI controller (Kc 6.25 %/°C, τI 240 s) whose valve
    /// saturates at `op_max`, stepped every 0.2 s with 0.02 °C of measurement noise, starting at
    /// steady state at 50 °C.
    pub fn jacketed_vessel(op_max: f64, seed: u64) -> LoopSimConfig {
        LoopSimConfig {
            process: Process::JACKETED_VESSEL,
            controller: PiController {
                gain: 6.25,
                integral_time_s: 240.0,
                op_min: 0.0,
                op_max,
            },
            step_s: 0.2,
            noise_sd: 0.02,
            seed,
            initial_sp: 50.0,
        }
    }
}

/// A PI controller acting on the error `SP − PV`, with the output clamped to the actuator range.
/// By default it runs in velocity form, which stops integrating while the output is clamped;
/// [`LoopSim::with_clamping_anti_windup`] switches it to the positional form with conditional
/// integration instead (both are usual anti-windup schemes of industrial controllers, common
/// practice; they agree whenever the output is not clamped).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PiController {
    /// Proportional gain Kc, OP units per PV unit. Its sign must match the process gain's sign.
    pub gain: f64,
    /// Integral time τI in seconds (> 0).
    pub integral_time_s: f64,
    pub op_min: f64,
    pub op_max: f64,
}

impl PiController {
    /// A PI controller whose OP is a percentage, 0–100 % (a valve's opening, a heater's power).
    pub const fn on_percent(gain: f64, integral_time_s: f64) -> PiController {
        PiController {
            gain,
            integral_time_s,
            op_min: 0.0,
            op_max: 100.0,
        }
    }
}

/// Everything needed to run one simulated loop.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoopSimConfig {
    pub process: Process,
    pub controller: PiController,
    /// Internal integration and control step in seconds.
    pub step_s: f64,
    /// Standard deviation of white measurement noise added to the PV the controller sees.
    pub noise_sd: f64,
    pub seed: u64,
    /// Setpoint at which the loop starts, at steady state.
    pub initial_sp: f64,
}

/// Everything needed to run one simulated loop of any model family.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlantSimConfig {
    pub dynamics: Dynamics,
    pub controller: PiController,
    /// Internal integration and control step in seconds.
    pub step_s: f64,
    /// Standard deviation of white measurement noise added to the PV the controller sees.
    pub noise_sd: f64,
    pub seed: u64,
    /// Setpoint at which the loop starts, at steady state.
    pub initial_sp: f64,
}

impl From<LoopSimConfig> for PlantSimConfig {
    fn from(c: LoopSimConfig) -> PlantSimConfig {
        PlantSimConfig {
            dynamics: Dynamics::Lags(c.process),
            controller: c.controller,
            step_s: c.step_s,
            noise_sd: c.noise_sd,
            seed: c.seed,
            initial_sp: c.initial_sp,
        }
    }
}

/// A running simulated loop. Each call to [`LoopSim::advance`] moves time on by one step.
#[derive(Debug, Clone)]
pub struct LoopSim {
    cfg: PlantSimConfig,
    x1: f64,
    x2: f64,
    /// Past OP values for the dead time, oldest first; length = dead-time steps.
    delay_line: VecDeque<f64>,
    /// How many OP values in a row, up to the latest, equal the latest.
    op_held_steps: usize,
    /// The latest OP value put into the dead time (the valve's position when one is fitted).
    last_op: f64,
    op: f64,
    prev_error: f64,
    pv_measured: f64,
    rng: Rng,
    /// Steps taken; time is `steps · step_s`, so it does not drift by rounding.
    steps: u64,
    /// Additive load disturbance on the PV, in PV units.
    pub disturbance: f64,
    /// When `false` the PV measurement freezes (a stale sensor) and the controller holds its output.
    pub sensor_ok: bool,
    /// The integral part of the positional law (OP units, with the bias), when it is in use.
    integral: Option<f64>,
    /// A sticky valve between the OP and the process, when one is fitted.
    valve: Option<StickyValve>,
}

/// One recorded sample.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SimSample {
    pub time_s: f64,
    pub sp: f64,
    pub pv: f64,
    pub op: f64,
}

impl LoopSim {
    /// Starts the loop at steady state at `initial_sp` (or at the nearest steady state the
    /// actuator range allows).
    pub fn new(cfg: LoopSimConfig) -> LoopSim {
        LoopSim::of_plant(cfg.into())
    }

    /// Starts a loop of any model family at steady state at `initial_sp` (or at the nearest
    /// steady state the actuator range allows; an integrating process rests at its balance OP).
    pub fn of_plant(cfg: PlantSimConfig) -> LoopSim {
        let d = cfg.dynamics;
        let c = cfg.controller;
        let op = d
            .holding_op(cfg.initial_sp)
            .unwrap_or(c.op_min)
            .clamp(c.op_min, c.op_max);
        let (x1, x2) = d.rest_state(op, cfg.initial_sp);
        let delay_steps = (d.dead_time_s() / cfg.step_s).round() as usize;
        let mut rng = Rng::new(cfg.seed);
        let pv_measured = d.output(x1, x2) + cfg.noise_sd * rng.normal();
        LoopSim {
            cfg,
            x1,
            x2,
            delay_line: std::iter::repeat_n(op, delay_steps).collect(),
            op_held_steps: delay_steps,
            last_op: op,
            op,
            prev_error: cfg.initial_sp - pv_measured,
            pv_measured,
            rng,
            steps: 0,
            disturbance: 0.0,
            sensor_ok: true,
            integral: None,
            valve: None,
        }
    }

    /// The same loop with a sticky valve between the controller's output and the process (see
    /// [`StickyValve`]), resting where the OP is now; its span is the controller's OP range. The
    /// OP the loop records stays the controller's output.
    pub fn with_sticky_valve(mut self, stiction: Stiction) -> LoopSim {
        let c = self.cfg.controller;
        self.valve = Some(StickyValve::new(stiction, c.op_min, c.op_max, self.op));
        self
    }

    /// The same loop with the controller in positional form and clamping anti-windup: the
    /// integral is frozen while the output is clamped and the error drives it further into the
    /// clamp (conditional integration; Åström & Hägglund, *Advanced PID Control*, 2006, §3.5 —
    /// from memory). Bumpless: the integral starts where it holds today's output.
    pub fn with_clamping_anti_windup(mut self) -> LoopSim {
        self.integral = Some(self.op - self.cfg.controller.gain * self.prev_error);
        self
    }

    pub fn time_s(&self) -> f64 {
        self.steps as f64 * self.cfg.step_s
    }

    /// The PV as measured (with noise) at the current time.
    pub fn pv(&self) -> f64 {
        self.pv_measured
    }

    /// The controller output at the current time.
    pub fn op(&self) -> f64 {
        self.op
    }

    /// The noise-free PV at the current time.
    pub fn pv_true(&self) -> f64 {
        self.cfg.dynamics.output(self.x1, self.x2) + self.disturbance
    }

    /// The loop's configuration.
    pub fn config(&self) -> &PlantSimConfig {
        &self.cfg
    }

    /// New controller settings from the next step on, as when someone retunes a loop in
    /// service. Bumpless: the velocity form only ever adds increments to the OP, and the
    /// positional form's integral is set so the OP stays where it is.
    pub fn retune(&mut self, controller: PiController) {
        self.cfg.controller = controller;
        if let Some(integral) = self.integral.as_mut() {
            *integral = self.op - controller.gain * self.prev_error;
        }
    }

    /// Advances one step with the given setpoint: the controller acts on the current measurement,
    /// then the process integrates exactly over the step (zero-order hold on the delayed OP).
    pub fn advance(&mut self, sp: f64) {
        let c = self.cfg.controller;
        let h = self.cfg.step_s;
        if self.sensor_ok {
            let e = sp - self.pv_measured;
            let di = c.gain * h / c.integral_time_s * e;
            self.op = match self.integral.as_mut() {
                None => {
                    let du = c.gain * (e - self.prev_error) + di;
                    (self.op + du).clamp(c.op_min, c.op_max)
                }
                Some(integral) => {
                    let trial = c.gain * e + *integral + di;
                    let deeper = (trial > c.op_max && di > 0.0) || (trial < c.op_min && di < 0.0);
                    if !deeper {
                        *integral += di;
                    }
                    (c.gain * e + *integral).clamp(c.op_min, c.op_max)
                }
            };
            self.prev_error = e;
        }
        self.step_plant();
    }

    /// Advances one step in manual: the OP is set to `op` (clamped to the actuator range) and the
    /// controller does nothing. For open-loop experiments on the plant, such as searching for the
    /// fastest input sequence from the loop's current state.
    pub fn advance_open_loop(&mut self, op: f64) {
        let c = self.cfg.controller;
        self.op = op.clamp(c.op_min, c.op_max);
        self.step_plant();
    }

    /// Whether the noise-free PV stays inside `[lo, hi]` for good if the OP stays where it is:
    /// `false` while OP values other than the current one are still in the dead time, or while a
    /// disturbance or a frozen sensor is in play. Exact for every family (see
    /// [`Dynamics`]'s update), so a search can stop simulating as soon as it holds.
    pub fn stays_within(&self, lo: f64, hi: f64) -> bool {
        self.op_held_steps >= self.delay_line.len()
            && self.disturbance == 0.0
            && self
                .cfg
                .dynamics
                .stays_within(self.x1, self.x2, self.last_op, lo, hi)
    }

    /// The OP (through the valve, if one is fitted) goes into the dead time, the process
    /// integrates exactly over the step (zero-order hold on the delayed OP), and the PV is
    /// measured.
    fn step_plant(&mut self) {
        let h = self.cfg.step_s;
        let input = match self.valve.as_mut() {
            Some(v) => v.drive(self.op),
            None => self.op,
        };
        self.op_held_steps = if input == self.last_op {
            self.op_held_steps + 1
        } else {
            1
        };
        self.last_op = input;
        self.delay_line.push_back(input);
        let u = self.delay_line.pop_front().unwrap_or(input);
        (self.x1, self.x2) = self.cfg.dynamics.step(self.x1, self.x2, u, h);
        self.steps += 1;
        if self.sensor_ok {
            self.pv_measured = self.pv_true() + self.cfg.noise_sd * self.rng.normal();
        }
    }

    /// Runs the loop for `duration_s` with a setpoint schedule of `(time, value)` pairs (the
    /// setpoint jumps to each value at its time), recording a sample every `sample_s` seconds
    /// (rounded to a whole number of steps), starting with the sample at time 0.
    pub fn run(
        &mut self,
        schedule: &[(f64, f64)],
        duration_s: f64,
        sample_s: f64,
    ) -> Vec<SimSample> {
        self.run_watched(schedule, duration_s, sample_s, |_, _| {})
    }

    /// [`LoopSim::run`], calling `at_change(loop, new_sp)` at each setpoint change with the loop
    /// as it stands at that moment (before the controller sees the new setpoint): the plant's
    /// true state at the change, for experiments from there.
    pub fn run_watched(
        &mut self,
        schedule: &[(f64, f64)],
        duration_s: f64,
        sample_s: f64,
        mut at_change: impl FnMut(&LoopSim, f64),
    ) -> Vec<SimSample> {
        let every = ((sample_s / self.cfg.step_s).round() as usize).max(1);
        let steps = (duration_s / self.cfg.step_s).round() as usize;
        let mut sp = self.cfg.initial_sp;
        let mut next = 0;
        let mut out = Vec::with_capacity(steps / every + 1);
        for k in 0..=steps {
            let t = self.time_s();
            while next < schedule.len() && schedule[next].0 <= t + 1e-9 {
                if schedule[next].1 != sp {
                    at_change(self, schedule[next].1);
                }
                sp = schedule[next].1;
                next += 1;
            }
            if k % every == 0 {
                out.push(SimSample {
                    time_s: t,
                    sp,
                    pv: self.pv_measured,
                    op: self.op,
                });
            }
            if k < steps {
                self.advance(sp);
            }
        }
        out
    }
}

/// Simulated samples as a series for the analysis, each time shifted by `t0_s` seconds.
pub fn series(samples: &[SimSample], t0_s: f64) -> Series {
    Series::new(
        samples.iter().map(|x| t0_s + x.time_s).collect(),
        samples.iter().map(|x| x.sp).collect(),
        samples.iter().map(|x| x.pv).collect(),
        samples.iter().map(|x| x.op).collect(),
        None,
    )
    .expect("a simulated run is a valid series")
}

/// SplitMix64 with a Box–Muller normal: tiny, seedable and good enough for measurement noise.
#[derive(Debug, Clone)]
pub struct Rng {
    state: u64,
    spare: Option<f64>,
}

impl Rng {
    pub fn new(seed: u64) -> Rng {
        Rng {
            state: seed ^ 0x9E37_79B9_7F4A_7C15,
            spare: None,
        }
    }

    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Standard normal.
    pub fn normal(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let u1 = self.uniform().max(f64::MIN_POSITIVE);
        let u2 = self.uniform();
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (2.0 * std::f64::consts::PI * u2).sin_cos();
        self.spare = Some(r * s);
        r * c
    }
}

#[cfg(test)]
mod tests;
