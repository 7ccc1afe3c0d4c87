//! A small, deterministic loop simulator: a process of one or two first-order lags plus dead time,
//! under a PI controller whose output saturates at the actuator limits.
//!
//! The analysis uses it to predict how a suggested PI tuning would respond on the identified
//! model; tests use it to build corpora with a known truth; the demo uses it as the plant. It is
//! pure (seeded noise, no clock) so the same inputs always give the same samples.

use super::Series;

/// A process: `PV = bias + x`, where `x` follows `K·u(t − θ)` through one or two first-order lags.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Process {
    /// Steady-state gain K, PV units per OP unit. Negative for reverse-acting processes (cooling).
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

/// A PI controller in velocity form acting on the error `SP − PV`, with the output clamped to
/// the actuator range. The velocity form stops integrating while the output is clamped, which is
/// the usual anti-windup of industrial controllers (common practice).
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

/// A running simulated loop. Each call to [`LoopSim::advance`] moves time on by one step.
#[derive(Debug, Clone)]
pub struct LoopSim {
    cfg: LoopSimConfig,
    x1: f64,
    x2: f64,
    /// Past OP values for the dead time, oldest first; length = dead-time steps.
    delay_line: std::collections::VecDeque<f64>,
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
        let p = cfg.process;
        let c = cfg.controller;
        let op = ((cfg.initial_sp - p.bias) / p.gain).clamp(c.op_min, c.op_max);
        let x = p.gain * op;
        let delay_steps = (p.dead_time_s / cfg.step_s).round() as usize;
        let mut rng = Rng::new(cfg.seed);
        let pv_measured = p.bias + x + cfg.noise_sd * rng.normal();
        LoopSim {
            cfg,
            x1: x,
            x2: x,
            delay_line: std::iter::repeat_n(op, delay_steps).collect(),
            op,
            prev_error: cfg.initial_sp - pv_measured,
            pv_measured,
            rng,
            steps: 0,
            disturbance: 0.0,
            sensor_ok: true,
        }
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
        let p = self.cfg.process;
        let x = if p.second_time_constant_s > 0.0 {
            self.x2
        } else {
            self.x1
        };
        p.bias + x + self.disturbance
    }

    /// Advances one step with the given setpoint: the controller acts on the current measurement,
    /// then the process integrates exactly over the step (zero-order hold on the delayed OP).
    pub fn advance(&mut self, sp: f64) {
        let c = self.cfg.controller;
        let h = self.cfg.step_s;
        if self.sensor_ok {
            let e = sp - self.pv_measured;
            let du = c.gain * ((e - self.prev_error) + h / c.integral_time_s * e);
            self.op = (self.op + du).clamp(c.op_min, c.op_max);
            self.prev_error = e;
        }
        self.delay_line.push_back(self.op);
        let u = self.delay_line.pop_front().unwrap_or(self.op);

        let p = self.cfg.process;
        let a1 = (-h / p.time_constant_s).exp();
        let target = p.gain * u;
        if p.second_time_constant_s > 0.0 {
            // Exact ZOH update of two lags in series (distinct time constants assumed; equal ones are
            // nudged apart by a part in a million, far below any effect on the response).
            let t1 = p.time_constant_s;
            let mut t2 = p.second_time_constant_s;
            if ((t1 - t2) / t1).abs() < 1e-6 {
                t2 *= 1.000_001;
            }
            let a2 = (-h / t2).exp();
            let d1 = self.x1 - target;
            let d2 = self.x2 - target;
            // x2 driven by x1: closed form of the cascade over one step.
            let new_d1 = d1 * a1;
            let new_d2 = d2 * a2 + d1 * t1 / (t1 - t2) * (a1 - a2);
            self.x1 = target + new_d1;
            self.x2 = target + new_d2;
        } else {
            self.x1 = target + (self.x1 - target) * a1;
            self.x2 = self.x1;
        }
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
        let every = ((sample_s / self.cfg.step_s).round() as usize).max(1);
        let steps = (duration_s / self.cfg.step_s).round() as usize;
        let mut sp = self.cfg.initial_sp;
        let mut next = 0;
        let mut out = Vec::with_capacity(steps / every + 1);
        for k in 0..=steps {
            let t = self.time_s();
            while next < schedule.len() && schedule[next].0 <= t + 1e-9 {
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
mod tests {
    use super::*;

    fn open_loop(process: Process, step_s: f64) -> LoopSim {
        // Kc = 0 with a huge τI leaves the OP where it starts: an open-loop test.
        LoopSim::new(LoopSimConfig {
            process,
            controller: PiController {
                gain: 0.0,
                integral_time_s: 1e9,
                op_min: -1e9,
                op_max: 1e9,
            },
            step_s,
            noise_sd: 0.0,
            seed: 1,
            initial_sp: process.bias,
        })
    }

    /// A first-order lag, K = 2, τ = 10 s, without dead time or bias; tests vary it.
    const LAG: Process = Process {
        gain: 2.0,
        time_constant_s: 10.0,
        second_time_constant_s: 0.0,
        dead_time_s: 0.0,
        bias: 0.0,
    };

    /// An open loop with its OP stepped from 0 to 1 at time 0.
    fn unit_step(process: Process, step_s: f64) -> LoopSim {
        let mut sim = open_loop(process, step_s);
        sim.op = 1.0;
        sim
    }

    #[test]
    fn first_order_reaches_63_percent_after_one_time_constant() {
        // First-order step response y(τ) = 1 − e⁻¹ ≈ 0.632 (standard result for K/(τs+1)).
        let p = Process {
            dead_time_s: 3.0,
            ..LAG
        };
        let mut sim = unit_step(p, 0.01);
        let mut t = 0.0;
        while t < 13.0 - 1e-9 {
            sim.advance(0.0);
            t += 0.01;
        }
        let expected = 2.0 * (1.0 - (-1.0f64).exp());
        assert!((sim.pv_true() - expected).abs() < 1e-3, "{}", sim.pv_true());
    }

    #[test]
    fn two_lags_match_the_closed_form_step_response() {
        // Step response of K/((τ1 s+1)(τ2 s+1)): K[1 − (τ1 e^{−t/τ1} − τ2 e^{−t/τ2})/(τ1 − τ2)].
        let p = Process {
            gain: 1.5,
            time_constant_s: 8.0,
            second_time_constant_s: 3.0,
            bias: 20.0,
            ..LAG
        };
        let mut sim = unit_step(p, 0.05);
        for _ in 0..200 {
            sim.advance(0.0);
        }
        let t = 10.0;
        let y = 1.5 * (1.0 - (8.0 * (-t / 8.0f64).exp() - 3.0 * (-t / 3.0f64).exp()) / 5.0);
        assert!(
            (sim.pv_true() - 20.0 - y).abs() < 1e-6,
            "{} vs {}",
            sim.pv_true() - 20.0,
            y
        );
    }

    #[test]
    fn pi_loop_settles_on_the_setpoint_and_respects_the_actuator_range() {
        let p = Process {
            dead_time_s: 2.0,
            ..LAG
        };
        let mut sim = LoopSim::new(LoopSimConfig {
            process: p,
            controller: PiController {
                gain: 1.25,
                integral_time_s: 10.0,
                op_min: 0.0,
                op_max: 0.9,
            },
            step_s: 0.01,
            noise_sd: 0.0,
            seed: 7,
            initial_sp: 0.5,
        });
        let samples = sim.run(&[(1.0, 1.5)], 120.0, 0.5);
        assert!(samples.iter().all(|s| (0.0..=0.9).contains(&s.op)));
        assert!(
            samples.iter().any(|s| s.op == 0.9),
            "the large step must saturate"
        );
        let last = samples.last().unwrap();
        assert!((last.pv - 1.5).abs() < 1e-3, "{}", last.pv);
    }

    #[test]
    fn noise_has_the_requested_spread() {
        let mut rng = Rng::new(42);
        let n = 20_000;
        let xs: Vec<f64> = (0..n).map(|_| rng.normal()).collect();
        let mean = xs.iter().sum::<f64>() / n as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n as f64;
        assert!(
            mean.abs() < 0.03 && (var - 1.0).abs() < 0.05,
            "{mean} {var}"
        );
    }
}
