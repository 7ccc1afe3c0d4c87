//! Where the demo's Modbus loops keep SP, PV and OP in the simulated cook-area controller, and
//! how the plant writes them there.
//!
//! The two loops use different layouts on purpose, as real controllers of different makes do:
//! TIC-120 holds three f32 values in holding registers (big-endian words); TIC-130 holds its
//! setpoint as a scaled integer in a holding register, its PV as an f32 with swapped words in
//! input registers, and its OP as a 0–27648 integer, the full-scale count of a common family of
//! analog output cards (common practice). The configuration the demo writes names the same
//! layout, so the daemon decodes exactly what the plant encoded.

use crate::modbus::registers::{Address, DataType, Order, Scaling, Source, Table};

/// The demo controller's name in the configuration.
pub const DEVICE: &str = "plc-cook";
/// Registers per table in the simulated controller.
pub const MAP_LEN: usize = 32;

/// One signal's place in the controller: a register source, as the daemon reads it.
pub type Register = Source;

fn register(table: Table, address: u16, data_type: DataType, order: Order, s: Scaling) -> Source {
    Source::new(table, Address::new(address), data_type, order, s)
        .expect("the demo's layouts are valid register sources")
}

fn f32(table: Table, address: u16, order: Order) -> Source {
    register(table, address, DataType::F32, order, Scaling::IDENTITY)
}

/// The source's keys for the configuration, as an inline TOML table.
pub fn toml(r: &Source) -> String {
    let table = match r.table {
        Table::Coils => "coils",
        Table::DiscreteInputs => "discrete_inputs",
        Table::InputRegisters => "input_registers",
        Table::HoldingRegisters => "holding_registers",
    };
    let scale = match r.scaling {
        s if s == Scaling::IDENTITY => String::new(),
        Scaling::Linear { scale, offset } => format!(", scale = {scale:?}, offset = {offset:?}"),
        Scaling::Range {
            raw_lo,
            raw_hi,
            eng_lo,
            eng_hi,
        } => {
            format!(", raw_range = [{raw_lo:?}, {raw_hi:?}], eng_range = [{eng_lo:?}, {eng_hi:?}]")
        }
    };
    format!(
        "{{ device = \"{DEVICE}\", table = \"{table}\", address = {}, data_type = \"{}\", order = \"{}\"{scale} }}",
        r.address, r.data_type, r.order
    )
}

/// SP, PV and OP of a Modbus loop, by tag.
pub fn layout(tag: &str) -> Option<[Source; 3]> {
    match tag {
        "TIC-120" => Some([
            f32(Table::HoldingRegisters, 0, Order::Abcd),
            f32(Table::HoldingRegisters, 2, Order::Abcd),
            f32(Table::HoldingRegisters, 4, Order::Abcd),
        ]),
        "TIC-130" => Some([
            // Hundredths of a kelvin.
            register(
                Table::HoldingRegisters,
                10,
                DataType::U16,
                Order::Abcd,
                Scaling::Linear {
                    scale: 0.01,
                    offset: 0.0,
                },
            ),
            f32(Table::InputRegisters, 0, Order::Cdab),
            register(
                Table::InputRegisters,
                2,
                DataType::U16,
                Order::Abcd,
                Scaling::Range {
                    raw_lo: 0.0,
                    raw_hi: 27_648.0,
                    eng_lo: 0.0,
                    eng_hi: 100.0,
                },
            ),
        ]),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::modbus::sim::device::RegisterMap;

    /// What the daemon would read back, decoded with the registers module's own scaling.
    fn read_back(r: &Register, map: &RegisterMap) -> f64 {
        let table = match r.table {
            Table::InputRegisters => &map.input_registers,
            _ => &map.holding_registers,
        };
        let a = usize::from(r.address.get());
        r.value(&table[a..a + usize::from(r.count())])
    }

    #[test]
    fn values_written_read_back_within_the_registers_resolution() {
        for tag in ["TIC-120", "TIC-130"] {
            for (r, v) in layout(tag).unwrap().iter().zip([81.25, 79.987_65, 63.4]) {
                let mut map = RegisterMap::new(MAP_LEN);
                map.put(r, v);
                let back = read_back(r, &map);
                let resolution = match r.scaling {
                    s if s == Scaling::IDENTITY => 1e-4,
                    Scaling::Linear { scale, .. } => scale,
                    Scaling::Range {
                        raw_lo,
                        raw_hi,
                        eng_lo,
                        eng_hi,
                    } => (eng_hi - eng_lo) / (raw_hi - raw_lo),
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
                let first = r.address.get();
                for a in first..first + r.count() {
                    assert!(!used.contains(&(r.table, a)), "{tag} {r:?}");
                    assert!(usize::from(a) < MAP_LEN);
                    used.push((r.table, a));
                }
            }
        }
    }
}
