//! The six loops of the Heron Reach pilot plant: each one's process, controller, spec and how it
//! reports (see the table in the module docs of `plant`).

use super::schedule::DOSED_RECIPE_C;
use super::{Intent, Link, Load, LoopDef};
use crate::analysis::sim::{LoopSimConfig, PiController, Process, Stiction};

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

/// FIC-101: feed flow from the day tank, a centrifugal pump P-101 at fixed speed throttled by
/// flow valve FV-101, measured by a magnetic flowmeter.
pub(super) fn feed_flow() -> LoopDef {
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
        trial: None,
        load: None,
        // While its instrument air runs low (see `schedule::LOW_AIR`) the actuator's thrust
        // barely beats the packing's static friction: the valve holds until the positioner's
        // input has moved 3 % of travel past where it stuck, then breaks free and jumps the
        // whole 3 % (pure stick-slip, J = S, in the two-parameter model; design choices of this
        // invented plant, a few per cent of travel being what sticking valves in service show,
        // common practice). Each jump moves the flow by 0.12 · 3 = 0.36 L/min: the integral
        // ramps the OP across the band, the valve jumps, the flow overshoots, and round again.
        stiction: Some(Stiction {
            s_pct: 3.0,
            j_pct: 3.0,
        }),
    }
}

/// TIC-110: product outlet temperature of plate pre-heater E-110, heated with hot water from
/// tank T-130 through valve TV-110.
pub(super) fn pre_heater() -> LoopDef {
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
        // The retune trial (see `schedule::RETUNE_TRIAL`): the gain raised 5.5 times, to 11 %/K,
        // for a faster recovery from loads, the integral time left at 50 s. From the process
        // model, the phase of 0.6·e^(−8.25 s)/((45 s + 1)(10 s + 1)) (the dead time with half
        // a controller step for its hold) reaches −180° at a period of 56 s, where its gain is
        // 1/12.9: proportional-only, the loop would cycle at Kc = 12.9 %/K (its ultimate gain).
        // The PI's integral adds lag, which lowers that limit to 10.5 %/K, cycling at 64 s.
        // At 11 %/K the loop is beyond it: it cycles, growing until the valve's travel limits
        // hold the swing.
        trial: Some(PiController::on_percent(11.0, 50.0)),
        load: None,
        stiction: None,
    }
}

/// TIC-120: cook kettle K-120, a 150 L stirred kettle with a 12 kW electric immersion heater
/// on a thyristor (OP = % of heater power). The product flows through it continuously.
pub(super) fn cook_kettle() -> LoopDef {
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
        trial: None,
        load: Some(dilution_water(capacity_kj_k, removed_kw_k)),
        stiction: None,
    }
}

/// The dilution water of the kettle's dosed recipe (see `schedule::DOSED_RECIPE_C`): mains water
/// at 12 °C, 0.7 L/min straight into the kettle (design choices of this invented plant; mains
/// water runs at 5–20 °C over a year in a temperate climate, common practice). Warming it to
/// the recipe's 83 °C takes 0.0117 kg/s · 4.18 kJ/(kg·K) · 71 K ≈ 3.5 kW: a load of −7.7 K on
/// the PV at a held OP (3.5 kW over the 0.45 kW/K the kettle loses per kelvin). At 83 °C the
/// heater has only 12 kW − 23 K · 0.45 kW/K ≈ 1.7 kW to spare (3.8 K of PV): with the heater at
/// full power the PV still sags, by up to 3.9 K, and no tuning could hold it. The water takes
/// its heat from the kettle's contents, so the load reaches the PV through the kettle's own time
/// constant (26 min: 45 min of dosing bring 82 % of it, a sag of about 2.5 K). The extra tenth
/// of through-flow it brings is left out of the kettle's gain and lag.
fn dilution_water(capacity_kj_k: f64, removed_kw_k: f64) -> Load {
    let water_kg_s = 0.7 * WATER_KG_PER_L / 60.0;
    let heat_kw = water_kg_s * CP_WATER_KJ_PER_KG_K * (DOSED_RECIPE_C - 12.0);
    Load {
        size: -heat_kw / removed_kw_k,
        lag_s: capacity_kj_k / removed_kw_k,
    }
}

/// TIC-130: hot-water tank T-130 (300 L) that feeds the pre-heater, heated by a steam coil
/// through valve TV-130. Its PI settings are the cautious ones left from commissioning.
pub(super) fn hot_water_tank() -> LoopDef {
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
        trial: None,
        load: None,
        stiction: None,
    }
}

/// TIC-140: product outlet of plate cooler E-140, cooled with chilled glycol through valve
/// TV-140. Reverse acting: opening the valve lowers the temperature.
pub(super) fn product_cooler() -> LoopDef {
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
        trial: None,
        load: None,
        stiction: None,
    }
}

/// LIC-150: level of buffer tank T-150 (0.1 m² cross-section, about 0.36 m across; 1 m
/// level span), filled through inlet valve LV-150 and drained by gravity through a fixed
/// orifice.
pub(super) fn buffer_tank_level() -> LoopDef {
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
        trial: None,
        load: None,
        stiction: None,
    }
}
