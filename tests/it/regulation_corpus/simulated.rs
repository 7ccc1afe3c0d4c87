//! Simulated loops for the regulation checks: a plant under a PI (and, if fitted, a sticky
//! valve), a setpoint schedule and a load on the PV, recorded once a second with the PV before
//! its measurement noise beside it.

use headroom::analysis::Series;
use headroom::analysis::sim::{
    Dynamics, LoopSim, PiController, PlantSimConfig, Process, Rng, Stiction,
};

/// Every loop is recorded, and its controller executes, once a second.
pub(crate) const SAMPLE_S: f64 = 1.0;

pub(crate) fn pick(rng: &mut Rng, lo: f64, hi: f64) -> f64 {
    lo + (hi - lo) * rng.uniform()
}

/// A load on the PV (PV units), as a function of time.
#[derive(Debug, Clone)]
pub(crate) enum Load {
    None,
    Sine {
        amplitude: f64,
        period_s: f64,
    },
    /// Steps of N(0, size²) at random times (mean interval given), through a first-order lag.
    RandomSteps {
        size: f64,
        mean_interval_s: f64,
        lag_s: f64,
        seed: u64,
    },
    /// Stationary noise of standard deviation `sd` through a first-order lag.
    FilteredNoise {
        sd: f64,
        lag_s: f64,
        seed: u64,
    },
    /// Given steps `(time, size)`, through a first-order lag.
    Steps {
        steps: Vec<(f64, f64)>,
        lag_s: f64,
    },
}

/// A load's value over time, step by step.
struct LoadState {
    load: Load,
    rng: Rng,
    level: f64,
    out: f64,
    last_t: f64,
}

impl LoadState {
    fn new(load: &Load) -> LoadState {
        let seed = match load {
            Load::RandomSteps { seed, .. } | Load::FilteredNoise { seed, .. } => *seed,
            _ => 0,
        };
        LoadState {
            load: load.clone(),
            rng: Rng::new(seed),
            level: 0.0,
            out: 0.0,
            last_t: 0.0,
        }
    }

    fn at(&mut self, t: f64) -> f64 {
        let h = t - self.last_t;
        self.last_t = t;
        let lagged = |out: f64, target: f64, lag: f64| target + (out - target) * (-h / lag).exp();
        match &self.load {
            Load::None => 0.0,
            Load::Sine {
                amplitude,
                period_s,
            } => amplitude * (2.0 * std::f64::consts::PI * t / period_s).sin(),
            Load::RandomSteps {
                size,
                mean_interval_s,
                lag_s,
                ..
            } => {
                if self.rng.uniform() < h / mean_interval_s {
                    self.level += size * self.rng.normal();
                }
                self.out = lagged(self.out, self.level, *lag_s);
                self.out
            }
            Load::FilteredNoise { sd, lag_s, .. } => {
                let a = (-h / lag_s).exp();
                self.out = a * self.out + sd * (1.0 - a * a).sqrt() * self.rng.normal();
                self.out
            }
            Load::Steps { steps, lag_s } => {
                self.level = steps
                    .iter()
                    .filter(|(at, _)| *at <= t + 1e-9)
                    .map(|s| s.1)
                    .sum();
                self.out = lagged(self.out, self.level, *lag_s);
                self.out
            }
        }
    }
}

/// A recorded run: the samples the product sees, and the PV without measurement noise.
pub(crate) struct Record {
    pub(crate) t: Vec<f64>,
    pub(crate) sp: Vec<f64>,
    pub(crate) pv: Vec<f64>,
    pub(crate) op: Vec<f64>,
    pub(crate) pv_true: Vec<f64>,
}

impl Record {
    pub(crate) fn series(&self) -> Series {
        Series::new(
            self.t.clone(),
            self.sp.clone(),
            self.pv.clone(),
            self.op.clone(),
            None,
        )
        .expect("a simulated run is a valid series")
    }
}

/// A loop to simulate.
#[derive(Debug, Clone)]
pub(crate) struct Scenario {
    pub(crate) plant: PlantSimConfig,
    pub(crate) stiction: Option<Stiction>,
    pub(crate) load: Load,
    /// Setpoint changes `(time, value)`.
    pub(crate) schedule: Vec<(f64, f64)>,
    pub(crate) duration_s: f64,
}

/// Runs a scenario, with or without its measurement noise.
pub(crate) fn record(case: &Scenario, noisy: bool) -> Record {
    let plant = PlantSimConfig {
        noise_sd: if noisy { case.plant.noise_sd } else { 0.0 },
        ..case.plant
    };
    let mut sim = LoopSim::of_plant(plant);
    if let Some(s) = case.stiction {
        sim = sim.with_sticky_valve(s);
    }
    let mut load = LoadState::new(&case.load);
    let steps = (case.duration_s / plant.step_s).round() as usize;
    let every = (SAMPLE_S / plant.step_s).round() as usize;
    let mut sp = plant.initial_sp;
    let mut next = 0;
    let mut r = Record {
        t: Vec::new(),
        sp: Vec::new(),
        pv: Vec::new(),
        op: Vec::new(),
        pv_true: Vec::new(),
    };
    for k in 0..=steps {
        let t = sim.time_s();
        while next < case.schedule.len() && case.schedule[next].0 <= t + 1e-9 {
            sp = case.schedule[next].1;
            next += 1;
        }
        if k % every == 0 {
            r.t.push(t);
            r.sp.push(sp);
            r.pv.push(sim.pv());
            r.op.push(sim.op());
            r.pv_true.push(sim.pv_true());
        }
        if k < steps {
            // The load at the end of the step, where the PV is next measured.
            sim.disturbance = load.at(t + plant.step_s);
            sim.advance(sp);
        }
    }
    r
}

/// The period and amplitude (median half peak-to-peak swing) of the PV's cycle about SP over
/// samples `[from, to)` of a record's PV before measurement noise, its cycles cut where the PV
/// rises through SP + `hyst` after being below SP − `hyst` (the noise the controller feeds
/// back moves even this PV a little); `None` with fewer than 5 whole cycles.
pub(crate) fn cycle_of(r: &Record, from: usize, to: usize, hyst: f64) -> Option<(f64, f64)> {
    let e: Vec<f64> = (from..to).map(|i| r.pv_true[i] - r.sp[i]).collect();
    let t = &r.t[from..to];
    let mut ups: Vec<(usize, f64)> = Vec::new();
    let mut low = false;
    for i in 1..e.len() {
        if e[i] < -hyst {
            low = true;
        } else if low && e[i] >= hyst {
            low = false;
            let frac = (hyst - e[i - 1]) / (e[i] - e[i - 1]);
            ups.push((i, t[i - 1] + (t[i] - t[i - 1]) * frac));
        }
    }
    if ups.len() < 6 {
        return None;
    }
    let periods: Vec<f64> = ups.windows(2).map(|w| w[1].1 - w[0].1).collect();
    let mut swings: Vec<f64> = ups
        .windows(2)
        .map(|w| {
            let seg = &e[w[0].0..w[1].0];
            let hi = seg.iter().fold(f64::MIN, |m, v| m.max(*v));
            let lo = seg.iter().fold(f64::MAX, |m, v| m.min(*v));
            0.5 * (hi - lo)
        })
        .collect();
    swings.sort_by(f64::total_cmp);
    Some((
        periods.iter().sum::<f64>() / periods.len() as f64,
        swings[swings.len() / 2],
    ))
}

/// SIMC PI settings (Skogestad 2003, in shared/REFERENCES.md §3): first order
/// Kc = τ/(K(τc + θ)), τI = min(τ, 4(τc + θ)); integrating Kc = 1/(k(τc + θ)), τI = 4(τc + θ).
pub(crate) fn simc(dynamics: &Dynamics, tau_c: f64) -> (f64, f64) {
    match dynamics {
        Dynamics::Lags(p) => {
            let s = tau_c + p.dead_time_s;
            (
                p.time_constant_s / (p.gain * s),
                p.time_constant_s.min(4.0 * s),
            )
        }
        Dynamics::Integrating(p) => {
            let s = tau_c + p.dead_time_s + p.lag_s;
            (1.0 / (p.gain_per_s * s), 4.0 * s)
        }
        _ => unreachable!("the corpus uses lags and integrating processes"),
    }
}

/// A first-order-plus-dead-time process resting at OP 50 % with the PV at 50.
pub(crate) fn fopdt(gain: f64, tau: f64, theta: f64) -> Dynamics {
    Dynamics::Lags(Process {
        gain,
        time_constant_s: tau,
        second_time_constant_s: 0.0,
        dead_time_s: theta,
        bias: 50.0 - 50.0 * gain,
    })
}

pub(crate) fn plant(
    dynamics: Dynamics,
    (kc, ti): (f64, f64),
    noise_sd: f64,
    seed: u64,
) -> PlantSimConfig {
    PlantSimConfig {
        dynamics,
        controller: PiController::on_percent(kc, ti),
        step_s: SAMPLE_S,
        noise_sd,
        seed,
        initial_sp: 50.0,
    }
}

/// Four holds of `hold_s`: up, back, and a smaller move up.
pub(crate) fn schedule(hold_s: f64, step: f64) -> (Vec<(f64, f64)>, f64) {
    (
        vec![
            (hold_s, 50.0 + step),
            (2.0 * hold_s, 50.0),
            (3.0 * hold_s, 50.0 + 0.6 * step),
        ],
        4.0 * hold_s,
    )
}
