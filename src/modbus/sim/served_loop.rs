//! A simulated loop behind a [`SimDevice`]: a process under a PI controller with a saturating
//! actuator ([`crate::analysis::sim`]) whose SP, PV and OP are served from holding registers, and
//! whose auto/manual state is served from a coil, as a small controller would publish them.
//!
//! The default is a loop of the invented Wrenmoor pilot plant: TIC-305, the outlet temperature
//! of hot-water skid B, where a 6 kW immersion heater warms a 40 L buffer tank (about 40 kg of
//! water, so a heat capacity of about 167 kJ/K from water's specific heat of 4.18 kJ/(kg·K),
//! Engineering ToolBox "Water – Specific Heat"; the gain and time constant below are rounded
//! from that, and the dead time is of the sensor's thermowell, from memory).
//!
//! The loop runs on simulated time, which advances `speed` times as fast as the wall clock, so a
//! test can watch hours of plant in minutes.

use super::device::SimDevice;
use crate::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process};
use crate::modbus::registers::{Address, DataType, Order, Scaling, Source, Table};
use std::sync::{Arc, Weak};
use std::time::Duration;
use tokio::task::JoinHandle;
use tokio::time::Instant;

/// Where the loop's values live: SP, PV and OP as f32 (ABCD) in holding registers from
/// `first_register` (SP, PV, OP: two registers each), and the auto flag in coil `auto_coil`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LoopLayout {
    pub first_register: u16,
    pub auto_coil: u16,
}

impl LoopLayout {
    pub const fn sp(self) -> u16 {
        self.first_register
    }
    pub const fn pv(self) -> u16 {
        self.first_register + 2
    }
    pub const fn op(self) -> u16 {
        self.first_register + 4
    }
}

/// A setpoint schedule: the setpoint jumps to each value at its time (simulated seconds from
/// the start), and the whole schedule starts over every `repeat_every_s` if given.
#[derive(Debug, Clone, PartialEq)]
pub struct Schedule {
    pub steps: Vec<(f64, f64)>,
    pub repeat_every_s: Option<f64>,
}

impl Schedule {
    /// The setpoint at simulated time `t_s`, or `initial` before the first step.
    pub fn at(&self, t_s: f64, initial: f64) -> f64 {
        // From the second cycle on, the last value of the previous cycle holds until the first
        // step of this one.
        let (t, before) = match self.repeat_every_s {
            Some(p) if p > 0.0 && t_s >= p => (t_s % p, self.steps.last().map_or(initial, |s| s.1)),
            _ => (t_s, initial),
        };
        self.steps
            .iter()
            .take_while(|s| s.0 <= t)
            .last()
            .map_or(before, |s| s.1)
    }
}

/// One simulated loop and how it is served.
#[derive(Debug, Clone)]
pub struct ServedLoop {
    pub config: LoopSimConfig,
    pub schedule: Schedule,
    pub layout: LoopLayout,
    /// Simulated seconds per wall-clock second.
    pub speed: f64,
}

impl ServedLoop {
    /// TIC-305 of the Wrenmoor pilot plant (see the module documentation), in °C and % heater
    /// power, with setpoint moves between 60 and 65 °C every 30 simulated minutes.
    pub fn wrenmoor_tic_305(speed: f64) -> ServedLoop {
        // 6 kW at 100 % into 167 kJ/K with losses to a 15 °C room through about 60 W/K: a gain
        // of 6000 W / 60 W/K / 100 % = 1 K/% and a time constant of 167 kJ/K / 60 W/K ≈ 2800 s.
        let process = Process {
            gain: 1.0,
            time_constant_s: 2800.0,
            second_time_constant_s: 0.0,
            dead_time_s: 20.0,
            bias: 15.0,
        };
        // SIMC PI for a target closed-loop time constant of 150 s: Kc = τ/(K(τc+θ)),
        // τI = min(τ, 4(τc+θ)) (Skogestad 2003).
        let tau_c = 150.0;
        let controller = PiController {
            gain: 2800.0 / (1.0 * (tau_c + 20.0)),
            integral_time_s: (4.0 * (tau_c + 20.0_f64)).min(2800.0),
            op_min: 0.0,
            op_max: 100.0,
        };
        ServedLoop {
            config: LoopSimConfig {
                process,
                controller,
                step_s: 1.0,
                noise_sd: 0.02,
                seed: 305,
                initial_sp: 60.0,
            },
            schedule: Schedule {
                steps: vec![(600.0, 65.0), (2400.0, 60.0)],
                repeat_every_s: Some(3600.0),
            },
            layout: LoopLayout {
                first_register: 100,
                auto_coil: 0,
            },
            speed,
        }
    }
}

/// Writes one loop's values into the device's registers, and sets its auto flag.
fn publish(device: &SimDevice, layout: LoopLayout, sp: f64, pv: f64, op: f64) {
    device.with_map(|m| {
        for (address, value) in [(layout.sp(), sp), (layout.pv(), pv), (layout.op(), op)] {
            m.put(&value_source(address), value);
        }
        m.put(&auto_source(layout.auto_coil), 1.0);
    });
}

/// An f32 (ABCD) in two holding registers from `address`.
fn value_source(address: u16) -> Source {
    Source::new(
        Table::HoldingRegisters,
        Address::new(address),
        DataType::F32,
        Order::Abcd,
        Scaling::IDENTITY,
    )
    .expect("an f32 fits below the last address of a loop layout")
}

fn auto_source(coil: u16) -> Source {
    Source::new(
        Table::Coils,
        Address::new(coil),
        DataType::Bool,
        Order::Abcd,
        Scaling::IDENTITY,
    )
    .expect("a coil is a valid bit source")
}

impl SimDevice {
    /// Runs `served` on this device until the device is dropped or the handle aborted: the loop
    /// advances to the simulated time the wall clock says, every `tick` of wall time, and its
    /// values are written to the registers. The values are there before this returns.
    pub fn serve_loop(self: &Arc<SimDevice>, served: ServedLoop, tick: Duration) -> JoinHandle<()> {
        let mut sim = LoopSim::new(served.config);
        let initial = served.config.initial_sp;
        publish(self, served.layout, initial, sim.pv(), sim.op());
        let device: Weak<SimDevice> = Arc::downgrade(self);
        tokio::spawn(async move {
            let start = Instant::now();
            let mut ticker = tokio::time::interval(tick);
            ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
            loop {
                ticker.tick().await;
                let Some(device) = device.upgrade() else {
                    return;
                };
                let target_s = start.elapsed().as_secs_f64() * served.speed;
                let mut sp = served.schedule.at(sim.time_s(), initial);
                while sim.time_s() + served.config.step_s <= target_s {
                    sp = served.schedule.at(sim.time_s(), initial);
                    sim.advance(sp);
                }
                publish(&device, served.layout, sp, sim.pv(), sim.op());
            }
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::modbus::registers::decode;
    use crate::modbus::sim::device::RegisterMap;

    #[test]
    fn a_schedule_steps_and_repeats() {
        let s = Schedule {
            steps: vec![(10.0, 55.0), (20.0, 50.0)],
            repeat_every_s: Some(30.0),
        };
        let at: Vec<f64> = [0.0, 9.9, 10.0, 19.0, 20.0, 29.0, 30.0, 40.0, 50.5, 95.0]
            .iter()
            .map(|&t| s.at(t, 48.0))
            .collect();
        assert_eq!(
            at,
            [48.0, 48.0, 55.0, 55.0, 50.0, 50.0, 50.0, 55.0, 50.0, 50.0]
        );
    }

    #[tokio::test]
    async fn a_served_loop_fills_its_registers_and_follows_its_setpoint() {
        let dev = Arc::new(SimDevice::start(0, RegisterMap::new(200)).await.unwrap());
        let mut served = ServedLoop::wrenmoor_tic_305(2000.0);
        served.schedule = Schedule {
            steps: vec![(100.0, 64.0)],
            repeat_every_s: None,
        };
        let read = |address: u16| {
            dev.with_map(|m| {
                let a = usize::from(address);
                decode(&m.holding_registers[a..a + 2], DataType::F32, Order::Abcd)
            })
        };
        let task = dev.serve_loop(served.clone(), Duration::from_millis(5));
        // At steady state at 60 °C: the heater covers the losses, 45 % for 45 K above ambient.
        assert_eq!(read(100), 60.0);
        assert!((read(104) - 45.0).abs() < 0.5, "{}", read(104));
        assert!(dev.with_map(|m| m.coils[0]));
        // Two thousand simulated seconds later, the loop has followed the step to 64 °C.
        tokio::time::sleep(Duration::from_millis(1500)).await;
        assert_eq!(read(100), 64.0);
        assert!((read(102) - 64.0).abs() < 0.3, "PV {}", read(102));
        task.abort();
    }
}
