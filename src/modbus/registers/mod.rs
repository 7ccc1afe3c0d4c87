//! Where a value lives on a Modbus device and how its registers turn into a number.
//!
//! Pure: no I/O, no clock. Everything the poller needs to know about one register source (table,
//! address, data type, word and byte order, scaling) is described and checked here.
//!
//! # Addressing: 0-based protocol addresses only
//!
//! An [`Address`] is the **0-based protocol (PDU) address** that travels in the request, 0–65535,
//! exactly as the Modbus Application Protocol Specification V1.1b3 defines it ("registers numbered
//! 1-16 are addressed as 0-15"). The table is chosen separately ([`Table`]), so the address carries
//! no table prefix.
//!
//! The Modicon reference notation (40001 = holding register 1 = protocol address 0, 30001 = input
//! register 1) is **not** accepted and **not** guessed at: 40001 is read as protocol address
//! 40001, because every value from 0 to 65535 is a legitimate protocol address and no rule can tell
//! a reference number from a real address in that range. To convert a manual's reference number,
//! drop the leading table digit and subtract one (40108 → holding register address 107). A number
//! above 65535, such as the six-digit form 400001, is out of range and rejected; the error says
//! which form is expected.

use serde::Deserialize;
use std::fmt;
use thiserror::Error;

/// Highest protocol address (the address field is 16 bits).
pub const MAX_ADDRESS: u16 = u16::MAX;

/// Problems with a register description; each message says what is expected.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum RegisterError {
    #[error(
        "address {0} is out of range: expected a 0-based protocol address 0-65535 \
         (reference notation such as 40001 or 400001 is not accepted)"
    )]
    AddressOutOfRange(i64),
    #[error(
        "{count} {unit} starting at address {start} run past the last address 65535 \
         (last would be {last})"
    )]
    SpanOutOfRange {
        start: u16,
        count: u32,
        last: u32,
        unit: &'static str,
    },
    #[error("data type {data_type} cannot be read from {table}; {expected}")]
    TypeNotInTable {
        data_type: DataType,
        table: Table,
        expected: &'static str,
    },
    #[error("unknown word/byte order {0:?}: expected ABCD, CDAB, BADC or DCBA")]
    UnknownOrder(String),
    #[error("scaling: {0}")]
    Scaling(&'static str),
    #[error("value {value} cannot be stored as {data_type}")]
    NotRepresentable { value: f64, data_type: DataType },
}

/// A 0-based Modbus protocol (PDU) address, 0–65535. See the module documentation for why the
/// 4xxxx reference notation is not accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Deserialize)]
#[serde(try_from = "i64")]
pub struct Address(u16);

impl Address {
    /// Any `u16` is a valid protocol address.
    pub const fn new(address: u16) -> Address {
        Address(address)
    }

    /// Checks a number from a configuration file: only 0–65535 is accepted.
    pub fn parse(value: i64) -> Result<Address, RegisterError> {
        u16::try_from(value)
            .map(Address)
            .map_err(|_| RegisterError::AddressOutOfRange(value))
    }

    pub const fn get(self) -> u16 {
        self.0
    }

    /// Checks that `count` elements starting here fit below 65536 and returns the last address.
    pub fn last_of(self, count: u16, table: Table) -> Result<Address, RegisterError> {
        let last = u32::from(self.0) + u32::from(count.max(1)) - 1;
        u16::try_from(last)
            .map(Address)
            .map_err(|_| RegisterError::SpanOutOfRange {
                start: self.0,
                count: u32::from(count),
                last,
                unit: table.unit(),
            })
    }
}

impl TryFrom<i64> for Address {
    type Error = RegisterError;
    fn try_from(value: i64) -> Result<Address, RegisterError> {
        Address::parse(value)
    }
}

impl fmt::Display for Address {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

/// The four Modbus data tables. Each is read by its own function code.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Table {
    /// Read/write bits, read with function code 1.
    Coils,
    /// Read-only bits, read with function code 2.
    DiscreteInputs,
    /// Read-only 16-bit registers, read with function code 4.
    InputRegisters,
    /// Read/write 16-bit registers, read with function code 3.
    HoldingRegisters,
}

impl Table {
    pub const ALL: [Table; 4] = [
        Table::Coils,
        Table::DiscreteInputs,
        Table::InputRegisters,
        Table::HoldingRegisters,
    ];

    /// The read function code for this table (Modbus V1.1b3 §6.1–6.4): 1, 2, 4 or 3.
    pub const fn read_function_code(self) -> u8 {
        match self {
            Table::Coils => 1,
            Table::DiscreteInputs => 2,
            Table::HoldingRegisters => 3,
            Table::InputRegisters => 4,
        }
    }

    /// True for the bit tables (coils, discrete inputs).
    pub const fn is_bits(self) -> bool {
        matches!(self, Table::Coils | Table::DiscreteInputs)
    }

    /// Most elements one read request may ask for (Modbus V1.1b3 §6.1–6.4): 2000 bits or 125
    /// registers.
    pub const fn protocol_max(self) -> u16 {
        if self.is_bits() { 2000 } else { 125 }
    }

    pub const fn as_str(self) -> &'static str {
        match self {
            Table::Coils => "coils",
            Table::DiscreteInputs => "discrete inputs",
            Table::InputRegisters => "input registers",
            Table::HoldingRegisters => "holding registers",
        }
    }

    const fn unit(self) -> &'static str {
        if self.is_bits() { "bits" } else { "registers" }
    }

    /// Checks that a data type can be read from this table.
    pub fn check(self, data_type: DataType) -> Result<(), RegisterError> {
        let fits = self.is_bits() == (data_type == DataType::Bool);
        if fits {
            return Ok(());
        }
        Err(RegisterError::TypeNotInTable {
            data_type,
            table: self,
            expected: if self.is_bits() {
                "bit tables hold only bool"
            } else {
                "bool is read from coils or discrete inputs"
            },
        })
    }
}

impl fmt::Display for Table {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// How the registers of one value are interpreted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DataType {
    /// One bit from a coil or discrete input: 0.0 or 1.0.
    Bool,
    U16,
    I16,
    U32,
    I32,
    F32,
    F64,
}

impl DataType {
    /// Elements the value occupies: bits for `Bool`, 16-bit registers otherwise.
    pub const fn register_count(self) -> u16 {
        match self {
            DataType::Bool | DataType::U16 | DataType::I16 => 1,
            DataType::U32 | DataType::I32 | DataType::F32 => 2,
            DataType::F64 => 4,
        }
    }

    pub const fn as_str(self) -> &'static str {
        match self {
            DataType::Bool => "bool",
            DataType::U16 => "u16",
            DataType::I16 => "i16",
            DataType::U32 => "u32",
            DataType::I32 => "i32",
            DataType::F32 => "f32",
            DataType::F64 => "f64",
        }
    }
}

impl fmt::Display for DataType {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Order of the registers of a multi-register value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum WordOrder {
    /// Most significant register first (the natural reading of the specification).
    BigEndian,
    /// Least significant register first: all registers of the value in reverse order.
    LittleEndian,
}

/// Order of the two bytes inside each register.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ByteOrder {
    /// High byte first, as the specification transmits every register.
    BigEndian,
    /// The two bytes of every register exchanged.
    Swapped,
}

/// Word and byte order together, named by where the bytes A (most significant) … D land for a
/// 32-bit value. The specification defines only 16-bit big-endian registers; the order of wider
/// values is the device's choice, so it is set per source.
///
/// For a 64-bit value (four registers), "word order" reverses all four registers and "byte order"
/// swaps the bytes inside each: `CDAB` reads `[GH, EF, CD, AB]`, `BADC` reads `[BA, DC, FE, HG]`.
/// For 16-bit values only the byte order matters (`BADC` and `DCBA` swap the register's bytes).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, Deserialize)]
pub enum Order {
    /// Big-endian words, big-endian bytes.
    #[default]
    #[serde(rename = "ABCD", alias = "abcd")]
    Abcd,
    /// Little-endian words, big-endian bytes ("word swapped").
    #[serde(rename = "CDAB", alias = "cdab")]
    Cdab,
    /// Big-endian words, swapped bytes ("byte swapped").
    #[serde(rename = "BADC", alias = "badc")]
    Badc,
    /// Little-endian words, swapped bytes (fully reversed).
    #[serde(rename = "DCBA", alias = "dcba")]
    Dcba,
}

impl Order {
    pub const ALL: [Order; 4] = [Order::Abcd, Order::Cdab, Order::Badc, Order::Dcba];

    pub const fn new(word: WordOrder, byte: ByteOrder) -> Order {
        match (word, byte) {
            (WordOrder::BigEndian, ByteOrder::BigEndian) => Order::Abcd,
            (WordOrder::LittleEndian, ByteOrder::BigEndian) => Order::Cdab,
            (WordOrder::BigEndian, ByteOrder::Swapped) => Order::Badc,
            (WordOrder::LittleEndian, ByteOrder::Swapped) => Order::Dcba,
        }
    }

    pub const fn word(self) -> WordOrder {
        match self {
            Order::Abcd | Order::Badc => WordOrder::BigEndian,
            Order::Cdab | Order::Dcba => WordOrder::LittleEndian,
        }
    }

    pub const fn byte(self) -> ByteOrder {
        match self {
            Order::Abcd | Order::Cdab => ByteOrder::BigEndian,
            Order::Badc | Order::Dcba => ByteOrder::Swapped,
        }
    }

    pub const fn as_str(self) -> &'static str {
        match self {
            Order::Abcd => "ABCD",
            Order::Cdab => "CDAB",
            Order::Badc => "BADC",
            Order::Dcba => "DCBA",
        }
    }
}

impl std::str::FromStr for Order {
    type Err = RegisterError;
    fn from_str(s: &str) -> Result<Order, RegisterError> {
        Order::ALL
            .into_iter()
            .find(|o| o.as_str().eq_ignore_ascii_case(s))
            .ok_or_else(|| RegisterError::UnknownOrder(s.to_string()))
    }
}

impl fmt::Display for Order {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Puts the registers of one value into natural order: most significant register first, high
/// byte first. The same exchange undoes itself, so it serves both decoding and encoding.
fn to_natural(i: usize, words: &[u16], order: Order) -> u16 {
    let n = words.len();
    let w = match order.word() {
        WordOrder::BigEndian => words[i],
        WordOrder::LittleEndian => words[n - 1 - i],
    };
    match order.byte() {
        ByteOrder::BigEndian => w,
        ByteOrder::Swapped => w.swap_bytes(),
    }
}

/// Joins the registers into one unsigned integer, most significant register first.
fn natural_bits(words: &[u16], order: Order) -> u64 {
    (0..words.len()).fold(0u64, |acc, i| {
        (acc << 16) | u64::from(to_natural(i, words, order))
    })
}

/// Decodes one value from its registers (bits read as 0 or 1 for `Bool`).
///
/// # Panics
///
/// If `words.len()` is not `data_type.register_count()`: the read plan hands each source exactly
/// its own registers, so a different length is a bug in the caller, not a device fault.
pub fn decode(words: &[u16], data_type: DataType, order: Order) -> f64 {
    assert_eq!(
        words.len(),
        usize::from(data_type.register_count()),
        "{data_type} takes {}",
        crate::units::count(
            usize::from(data_type.register_count()),
            "register",
            "registers"
        )
    );
    let bits = natural_bits(words, order);
    match data_type {
        DataType::Bool => f64::from(u8::from(words[0] != 0)),
        DataType::U16 => f64::from(bits as u16),
        DataType::I16 => f64::from(bits as u16 as i16),
        DataType::U32 => f64::from(bits as u32),
        DataType::I32 => f64::from(bits as u32 as i32),
        DataType::F32 => f64::from(f32::from_bits(bits as u32)),
        DataType::F64 => f64::from_bits(bits),
    }
}

/// The inverse of [`decode`]: the registers a device would hold for `value`. Integer types need
/// an integral value in range; `F32` rounds to the nearest single-precision value.
pub fn encode(value: f64, data_type: DataType, order: Order) -> Result<Vec<u16>, RegisterError> {
    let bad = || RegisterError::NotRepresentable { value, data_type };
    let int_in = |lo: f64, hi: f64| {
        if value.fract() == 0.0 && (lo..=hi).contains(&value) {
            Ok(value)
        } else {
            Err(bad())
        }
    };
    let bits: u64 = match data_type {
        DataType::Bool if value == 0.0 => 0,
        DataType::Bool if value == 1.0 => 1,
        DataType::Bool => return Err(bad()),
        DataType::U16 => int_in(0.0, f64::from(u16::MAX))? as u64,
        DataType::I16 => u64::from(int_in(f64::from(i16::MIN), f64::from(i16::MAX))? as i16 as u16),
        DataType::U32 => int_in(0.0, f64::from(u32::MAX))? as u64,
        DataType::I32 => u64::from(int_in(f64::from(i32::MIN), f64::from(i32::MAX))? as i32 as u32),
        DataType::F32 => {
            let narrowed = value as f32;
            if value.is_finite() && !narrowed.is_finite() {
                return Err(bad());
            }
            u64::from(narrowed.to_bits())
        }
        DataType::F64 => value.to_bits(),
    };
    let n = usize::from(data_type.register_count());
    let natural: Vec<u16> = (0..n)
        .map(|i| (bits >> (16 * (n - 1 - i))) as u16)
        .collect();
    // Applying the order to natural words gives the device's layout (the exchange is its own
    // inverse).
    Ok((0..n).map(|i| to_natural(i, &natural, order)).collect())
}

/// Turns a decoded raw value into engineering units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Scaling {
    /// `engineering = raw × scale + offset`.
    Linear { scale: f64, offset: f64 },
    /// Linear map of `raw_lo..raw_hi` onto `eng_lo..eng_hi` (extrapolated outside the range; a
    /// raw value outside it is still reported, never clamped).
    Range {
        raw_lo: f64,
        raw_hi: f64,
        eng_lo: f64,
        eng_hi: f64,
    },
}

impl Default for Scaling {
    fn default() -> Scaling {
        Scaling::IDENTITY
    }
}

impl Scaling {
    pub const IDENTITY: Scaling = Scaling::Linear {
        scale: 1.0,
        offset: 0.0,
    };

    /// Scale and offset; the scale must be finite and non-zero, the offset finite.
    pub fn linear(scale: f64, offset: f64) -> Result<Scaling, RegisterError> {
        if !scale.is_finite() || !offset.is_finite() {
            return Err(RegisterError::Scaling(
                "scale and offset must be finite numbers",
            ));
        }
        if scale == 0.0 {
            return Err(RegisterError::Scaling(
                "scale 0 would turn every reading into the offset",
            ));
        }
        Ok(Scaling::Linear { scale, offset })
    }

    /// Raw range onto engineering range; both ends finite, the raw ends distinct, the
    /// engineering ends distinct.
    pub fn range(
        raw_lo: f64,
        raw_hi: f64,
        eng_lo: f64,
        eng_hi: f64,
    ) -> Result<Scaling, RegisterError> {
        if ![raw_lo, raw_hi, eng_lo, eng_hi]
            .iter()
            .all(|v| v.is_finite())
        {
            return Err(RegisterError::Scaling("range ends must be finite numbers"));
        }
        if raw_lo == raw_hi {
            return Err(RegisterError::Scaling("the raw range has zero width"));
        }
        if eng_lo == eng_hi {
            return Err(RegisterError::Scaling(
                "the engineering range has zero width",
            ));
        }
        Ok(Scaling::Range {
            raw_lo,
            raw_hi,
            eng_lo,
            eng_hi,
        })
    }

    /// The raw value that [`Scaling::apply`] turns into `eng` (what a simulated device stores).
    pub fn raw_for(self, eng: f64) -> f64 {
        match self {
            Scaling::Linear { scale, offset } => (eng - offset) / scale,
            Scaling::Range {
                raw_lo,
                raw_hi,
                eng_lo,
                eng_hi,
            } => raw_lo + (eng - eng_lo) * (raw_hi - raw_lo) / (eng_hi - eng_lo),
        }
    }

    pub fn apply(self, raw: f64) -> f64 {
        match self {
            Scaling::Linear { scale, offset } => raw * scale + offset,
            Scaling::Range {
                raw_lo,
                raw_hi,
                eng_lo,
                eng_hi,
            } => eng_lo + (raw - raw_lo) * (eng_hi - eng_lo) / (raw_hi - raw_lo),
        }
    }
}

/// One value on a device: where it is and how to read it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Source {
    pub table: Table,
    pub address: Address,
    pub data_type: DataType,
    pub order: Order,
    pub scaling: Scaling,
}

impl Source {
    /// Checks the type against the table and the span against the address space.
    pub fn new(
        table: Table,
        address: Address,
        data_type: DataType,
        order: Order,
        scaling: Scaling,
    ) -> Result<Source, RegisterError> {
        table.check(data_type)?;
        address.last_of(data_type.register_count(), table)?;
        Ok(Source {
            table,
            address,
            data_type,
            order,
            scaling,
        })
    }

    /// Number of elements (registers or bits) the source occupies.
    pub const fn count(&self) -> u16 {
        self.data_type.register_count()
    }

    /// Decodes and scales the source's own registers.
    pub fn value(&self, words: &[u16]) -> f64 {
        self.scaling
            .apply(decode(words, self.data_type, self.order))
    }
}

#[cfg(test)]
mod tests;
