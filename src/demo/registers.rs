//! Where the demo's Modbus loops keep SP, PV and OP in the simulated cook-area controller, and
//! how the plant writes them there.
//!
//! The two loops use different layouts on purpose, as real controllers of different makes do:
//! TIC-120 holds three f32 values in holding registers (big-endian words); TIC-130 holds its
//! setpoint as a scaled integer in a holding register, its PV as an f32 with swapped words in
//! input registers, and its OP as a 0–27648 integer, the full-scale count of a common family of
//! analog output cards (common practice). The configuration the demo writes names the same
//! layout, so the daemon decodes exactly what the plant encoded.

use crate::modbus::device::RegisterMap;
use crate::modbus::registers::{DataType, Order, Table, encode};

/// The demo controller's name in the configuration.
pub const DEVICE: &str = "plc-cook";
/// Registers per table in the simulated controller.
pub const MAP_LEN: usize = 32;

/// How a raw register value maps to engineering units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Scale {
    /// The register holds the value itself.
    None,
    /// value = raw × factor.
    Factor(f64),
    /// raw `raw[0]..raw[1]` is `eng[0]..eng[1]`.
    Range { raw: [f64; 2], eng: [f64; 2] },
}

/// One signal's place in the controller.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Register {
    pub table: Table,
    pub address: u16,
    pub data_type: DataType,
    pub order: Order,
    pub scale: Scale,
}

impl Register {
    const fn f32(table: Table, address: u16, order: Order) -> Register {
        Register {
            table,
            address,
            data_type: DataType::F32,
            order,
            scale: Scale::None,
        }
    }

    /// The source's keys for the configuration, as an inline TOML table.
    pub fn toml(&self) -> String {
        let table = match self.table {
            Table::Coils => "coils",
            Table::DiscreteInputs => "discrete_inputs",
            Table::InputRegisters => "input_registers",
            Table::HoldingRegisters => "holding_registers",
        };
        let data_type = self.data_type.as_str();
        let order = self.order;
        let scale = match self.scale {
            Scale::None => String::new(),
            Scale::Factor(f) => format!(", scale = {f:?}"),
            Scale::Range { raw, eng } => format!(
                ", raw_range = [{:?}, {:?}], eng_range = [{:?}, {:?}]",
                raw[0], raw[1], eng[0], eng[1]
            ),
        };
        format!(
            "{{ device = \"{DEVICE}\", table = \"{table}\", address = {}, data_type = \"{data_type}\", order = \"{order}\"{scale} }}",
            self.address
        )
    }

    /// The raw value the controller holds for `value` (integers rounded and kept in range).
    fn raw(&self, value: f64) -> f64 {
        let raw = match self.scale {
            Scale::None => value,
            Scale::Factor(f) => value / f,
            Scale::Range { raw, eng } => {
                raw[0] + (value - eng[0]) / (eng[1] - eng[0]) * (raw[1] - raw[0])
            }
        };
        match self.data_type {
            DataType::U16 => raw.round().clamp(0.0, f64::from(u16::MAX)),
            DataType::I16 => raw.round().clamp(f64::from(i16::MIN), f64::from(i16::MAX)),
            _ => raw,
        }
    }

    /// Writes `value` into the map.
    pub fn write(&self, map: &mut RegisterMap, value: f64) {
        let Ok(words) = encode(self.raw(value), self.data_type, self.order) else {
            return;
        };
        let table = match self.table {
            Table::InputRegisters => &mut map.input_registers,
            Table::HoldingRegisters => &mut map.holding_registers,
            Table::Coils | Table::DiscreteInputs => return,
        };
        let start = usize::from(self.address);
        if let Some(slot) = table.get_mut(start..start + words.len()) {
            slot.copy_from_slice(&words);
        }
    }
}

/// SP, PV and OP of a Modbus loop, by tag.
pub fn layout(tag: &str) -> Option<[Register; 3]> {
    match tag {
        "TIC-120" => Some([
            Register::f32(Table::HoldingRegisters, 0, Order::Abcd),
            Register::f32(Table::HoldingRegisters, 2, Order::Abcd),
            Register::f32(Table::HoldingRegisters, 4, Order::Abcd),
        ]),
        "TIC-130" => Some([
            Register {
                table: Table::HoldingRegisters,
                address: 10,
                data_type: DataType::U16,
                order: Order::Abcd,
                // Hundredths of a kelvin.
                scale: Scale::Factor(0.01),
            },
            Register::f32(Table::InputRegisters, 0, Order::Cdab),
            Register {
                table: Table::InputRegisters,
                address: 2,
                data_type: DataType::U16,
                order: Order::Abcd,
                scale: Scale::Range {
                    raw: [0.0, 27_648.0],
                    eng: [0.0, 100.0],
                },
            },
        ]),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::modbus::registers::{Scaling, decode};

    /// What the daemon would read back, decoded with the registers module's own scaling.
    fn read_back(r: &Register, map: &RegisterMap) -> f64 {
        let table = match r.table {
            Table::InputRegisters => &map.input_registers,
            _ => &map.holding_registers,
        };
        let n = usize::from(r.data_type.register_count());
        let words = &table[usize::from(r.address)..usize::from(r.address) + n];
        let scaling = match r.scale {
            Scale::None => Scaling::IDENTITY,
            Scale::Factor(f) => Scaling::linear(f, 0.0).unwrap(),
            Scale::Range { raw, eng } => Scaling::range(raw[0], raw[1], eng[0], eng[1]).unwrap(),
        };
        scaling.apply(decode(words, r.data_type, r.order))
    }

    #[test]
    fn values_written_read_back_within_the_registers_resolution() {
        for tag in ["TIC-120", "TIC-130"] {
            for (r, v) in layout(tag).unwrap().iter().zip([81.25, 79.987_65, 63.4]) {
                let mut map = RegisterMap::new(MAP_LEN);
                r.write(&mut map, v);
                let back = read_back(r, &map);
                let resolution = match r.scale {
                    Scale::None => 1e-4,
                    Scale::Factor(f) => f,
                    Scale::Range { raw, eng } => (eng[1] - eng[0]) / (raw[1] - raw[0]),
                };
                assert!((back - v).abs() <= resolution, "{tag} {r:?}: {v} → {back}");
            }
        }
    }

    #[test]
    fn layouts_do_not_overlap() {
        let mut used: Vec<(Table, u16)> = Vec::new();
        for tag in ["TIC-120", "TIC-130"] {
            for r in layout(tag).unwrap() {
                for a in r.address..r.address + r.data_type.register_count() {
                    assert!(!used.contains(&(r.table, a)), "{tag} {r:?}");
                    assert!(usize::from(a) < MAP_LEN);
                    used.push((r.table, a));
                }
            }
        }
    }
}
