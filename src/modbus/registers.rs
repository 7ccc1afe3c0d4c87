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
        "{data_type} takes {} register(s)",
        data_type.register_count()
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
mod tests {
    use super::*;

    // Modbus 123.456f check values: REFERENCES.md 7c (IEEE 754 single precision, 0x42F6E979).
    const F123_456: [(Order, [u16; 2]); 4] = [
        (Order::Abcd, [0x42F6, 0xE979]),
        (Order::Cdab, [0xE979, 0x42F6]),
        (Order::Badc, [0xF642, 0x79E9]),
        (Order::Dcba, [0x79E9, 0xF642]),
    ];

    #[test]
    fn f32_123_456_in_all_four_orders() {
        for (order, words) in F123_456 {
            let v = decode(&words, DataType::F32, order);
            assert_eq!(v, f64::from(123.456_f32), "{order}");
            assert_eq!(encode(123.456, DataType::F32, order).unwrap(), words);
        }
    }

    #[test]
    fn f32_small_values() {
        // REFERENCES.md 7c: 1.0f = 0x3F800000 → ABCD [0x3F80, 0x0000], CDAB [0x0000, 0x3F80].
        assert_eq!(decode(&[0x3F80, 0x0000], DataType::F32, Order::Abcd), 1.0);
        assert_eq!(decode(&[0x0000, 0x3F80], DataType::F32, Order::Cdab), 1.0);
        // Byte-swapped forms of the same bits (hand-derived from 0x3F800000).
        assert_eq!(decode(&[0x803F, 0x0000], DataType::F32, Order::Badc), 1.0);
        assert_eq!(decode(&[0x0000, 0x803F], DataType::F32, Order::Dcba), 1.0);
        // REFERENCES.md 7c: 100.0f = 0x42C80000.
        assert_eq!(decode(&[0x42C8, 0x0000], DataType::F32, Order::Abcd), 100.0);
        assert_eq!(decode(&[0x0000, 0x42C8], DataType::F32, Order::Cdab), 100.0);
        // REFERENCES.md 7c: -2.5f = 0xC0200000.
        assert_eq!(decode(&[0xC020, 0x0000], DataType::F32, Order::Abcd), -2.5);
        assert_eq!(decode(&[0x0000, 0x20C0], DataType::F32, Order::Dcba), -2.5);
    }

    #[test]
    fn sixteen_bit_values() {
        // Two's complement (hand-computed): i16 -1 = 0xFFFF, i16 -32768 = 0x8000.
        assert_eq!(decode(&[0xFFFF], DataType::I16, Order::Abcd), -1.0);
        assert_eq!(decode(&[0xFFFF], DataType::U16, Order::Abcd), 65535.0);
        assert_eq!(decode(&[0x8000], DataType::I16, Order::Abcd), -32768.0);
        // Modbus V1.1b3 §6.3 example: register 108 holds 0x022B = 555.
        assert_eq!(decode(&[0x022B], DataType::U16, Order::Abcd), 555.0);
        // Word order is meaningless for one register; the byte order swaps it.
        assert_eq!(decode(&[0x022B], DataType::U16, Order::Cdab), 555.0);
        assert_eq!(decode(&[0x2B02], DataType::U16, Order::Badc), 555.0);
        assert_eq!(decode(&[0x2B02], DataType::U16, Order::Dcba), 555.0);
        // i16 -2 = 0xFFFE (hand-computed); swapped bytes 0xFEFF.
        assert_eq!(decode(&[0xFEFF], DataType::I16, Order::Badc), -2.0);
    }

    #[test]
    fn thirty_two_bit_integers() {
        // 123456789 = 0x075BCD15 (hand-computed: 7·2^24 + 0x5B·2^16 + 0xCD·2^8 + 0x15).
        let cases = [
            (Order::Abcd, [0x075B, 0xCD15]),
            (Order::Cdab, [0xCD15, 0x075B]),
            (Order::Badc, [0x5B07, 0x15CD]),
            (Order::Dcba, [0x15CD, 0x5B07]),
        ];
        for (order, words) in cases {
            assert_eq!(decode(&words, DataType::U32, order), 123_456_789.0);
            assert_eq!(decode(&words, DataType::I32, order), 123_456_789.0);
            assert_eq!(encode(123_456_789.0, DataType::U32, order).unwrap(), words);
        }
        // 70000 = 0x00011170 (hand-computed: 65536 + 4464): shows the word order matters.
        assert_eq!(
            decode(&[0x0001, 0x1170], DataType::U32, Order::Abcd),
            70_000.0
        );
        assert_eq!(
            decode(&[0x1170, 0x0001], DataType::U32, Order::Cdab),
            70_000.0
        );
        // -123456789 = 0xF8A432EB (two's complement of 0x075BCD15, hand-computed).
        assert_eq!(
            decode(&[0xF8A4, 0x32EB], DataType::I32, Order::Abcd),
            -123_456_789.0
        );
        assert_eq!(
            decode(&[0x32EB, 0xF8A4], DataType::I32, Order::Cdab),
            -123_456_789.0
        );
        assert_eq!(
            decode(&[0xF8A4, 0x32EB], DataType::U32, Order::Abcd),
            4_171_510_507.0
        );
        // i32 -1 = 0xFFFFFFFF reads the same in every order.
        for order in Order::ALL {
            assert_eq!(decode(&[0xFFFF, 0xFFFF], DataType::I32, order), -1.0);
        }
    }

    #[test]
    fn f64_values() {
        // -2.5 as IEEE 754 double, computed by hand: sign 1, exponent 1 + 1023 = 0x400, fraction
        // 0.25 → 0x4_0000_0000_0000, so 0xC004_0000_0000_0000.
        assert_eq!(decode(&[0xC004, 0, 0, 0], DataType::F64, Order::Abcd), -2.5);
        // 123.456 as IEEE 754 double = 0x405EDD2F1A9FBE77 (computed here with Python's
        // struct.pack('>d', 123.456)).
        let cases = [
            (Order::Abcd, [0x405E, 0xDD2F, 0x1A9F, 0xBE77]),
            (Order::Cdab, [0xBE77, 0x1A9F, 0xDD2F, 0x405E]),
            (Order::Badc, [0x5E40, 0x2FDD, 0x9F1A, 0x77BE]),
            (Order::Dcba, [0x77BE, 0x9F1A, 0x2FDD, 0x5E40]),
        ];
        for (order, words) in cases {
            assert_eq!(decode(&words, DataType::F64, order), 123.456, "{order}");
            assert_eq!(encode(123.456, DataType::F64, order).unwrap(), words);
        }
    }

    #[test]
    fn bool_reads_zero_or_one() {
        assert_eq!(decode(&[0], DataType::Bool, Order::Abcd), 0.0);
        assert_eq!(decode(&[1], DataType::Bool, Order::Dcba), 1.0);
    }

    #[test]
    fn encode_round_trips_and_refuses_what_does_not_fit() {
        for order in Order::ALL {
            for (v, t) in [
                (-1.0, DataType::I16),
                (65535.0, DataType::U16),
                (-2_147_483_648.0, DataType::I32),
                (4_294_967_295.0, DataType::U32),
                (-2.5, DataType::F32),
                (std::f64::consts::PI, DataType::F64),
            ] {
                let words = encode(v, t, order).unwrap();
                assert_eq!(words.len(), usize::from(t.register_count()));
                assert_eq!(decode(&words, t, order), v, "{t} {order}");
            }
        }
        assert!(encode(65536.0, DataType::U16, Order::Abcd).is_err());
        assert!(encode(-1.0, DataType::U32, Order::Abcd).is_err());
        assert!(encode(1.5, DataType::I16, Order::Abcd).is_err());
        assert!(encode(1e300, DataType::F32, Order::Abcd).is_err());
        assert!(encode(2.0, DataType::Bool, Order::Abcd).is_err());
    }

    #[test]
    #[should_panic(expected = "f32 takes 2 register(s)")]
    fn decode_rejects_wrong_length() {
        decode(&[0x42F6], DataType::F32, Order::Abcd);
    }

    #[test]
    fn register_counts() {
        assert_eq!(DataType::Bool.register_count(), 1);
        assert_eq!(DataType::U16.register_count(), 1);
        assert_eq!(DataType::I16.register_count(), 1);
        assert_eq!(DataType::U32.register_count(), 2);
        assert_eq!(DataType::I32.register_count(), 2);
        assert_eq!(DataType::F32.register_count(), 2);
        assert_eq!(DataType::F64.register_count(), 4);
    }

    #[test]
    fn order_parts_and_names() {
        for order in Order::ALL {
            assert_eq!(Order::new(order.word(), order.byte()), order);
            assert_eq!(order.as_str().parse::<Order>().unwrap(), order);
            assert_eq!(
                order.as_str().to_lowercase().parse::<Order>().unwrap(),
                order
            );
        }
        assert_eq!(Order::Cdab.word(), WordOrder::LittleEndian);
        assert_eq!(Order::Badc.byte(), ByteOrder::Swapped);
        assert!("ACBD".parse::<Order>().is_err());
    }

    #[test]
    fn addresses_are_zero_based_protocol_addresses() {
        assert_eq!(Address::parse(0).unwrap().get(), 0);
        assert_eq!(Address::parse(65535).unwrap().get(), 65535);
        // Reference notation is not reinterpreted: 40001 stays protocol address 40001, not
        // holding register 1 (REFERENCES.md 7c: the 4xxxx form is a convention outside the spec).
        assert_eq!(Address::parse(40001).unwrap().get(), 40001);
        // Out of range, including the six-digit reference form; the message names the form.
        for bad in [-1, 65536, 400001] {
            let err = Address::parse(bad).unwrap_err();
            assert_eq!(err, RegisterError::AddressOutOfRange(bad));
            assert!(err.to_string().contains("0-based protocol address 0-65535"));
        }
    }

    #[test]
    fn spans_must_fit_in_the_address_space() {
        let t = Table::HoldingRegisters;
        assert_eq!(Address::new(65534).last_of(2, t).unwrap().get(), 65535);
        let err = Address::new(65535).last_of(2, t).unwrap_err();
        assert!(
            err.to_string().contains("run past the last address 65535"),
            "{err}"
        );
        assert!(
            Source::new(
                t,
                Address::new(65533),
                DataType::F64,
                Order::Abcd,
                Scaling::IDENTITY
            )
            .is_err()
        );
    }

    #[test]
    fn tables_and_types() {
        assert_eq!(Table::Coils.read_function_code(), 1);
        assert_eq!(Table::DiscreteInputs.read_function_code(), 2);
        assert_eq!(Table::HoldingRegisters.read_function_code(), 3);
        assert_eq!(Table::InputRegisters.read_function_code(), 4);
        assert!(Table::Coils.check(DataType::Bool).is_ok());
        assert!(Table::Coils.check(DataType::U16).is_err());
        assert!(Table::InputRegisters.check(DataType::Bool).is_err());
        assert!(Table::InputRegisters.check(DataType::F64).is_ok());
    }

    #[test]
    fn scaling() {
        let s = Scaling::linear(0.1, -40.0).unwrap();
        assert!((s.apply(650.0) - 25.0).abs() < 1e-12);
        // 4-20 mA as 0..27648 raw counts onto 0..150 °C: midpoint 13824 → 75.
        let r = Scaling::range(0.0, 27648.0, 0.0, 150.0).unwrap();
        assert_eq!(r.apply(13824.0), 75.0);
        assert_eq!(r.apply(0.0), 0.0);
        assert_eq!(r.apply(27648.0), 150.0);
        // A reversed range works and values outside are extrapolated, not clamped.
        let rev = Scaling::range(0.0, 100.0, 100.0, 0.0).unwrap();
        assert_eq!(rev.apply(25.0), 75.0);
        assert_eq!(rev.apply(110.0), -10.0);
        assert_eq!(Scaling::default().apply(3.5), 3.5);
        assert!(Scaling::linear(0.0, 1.0).is_err());
        assert!(Scaling::linear(f64::NAN, 0.0).is_err());
        assert!(Scaling::range(5.0, 5.0, 0.0, 1.0).is_err());
        assert!(Scaling::range(0.0, 1.0, 2.0, 2.0).is_err());
        assert!(Scaling::range(0.0, f64::INFINITY, 0.0, 1.0).is_err());
    }

    #[test]
    fn raw_for_undoes_apply() {
        // A 0-27648 count for 0-150 °C: 50 °C is a third of the count.
        let range = Scaling::range(0.0, 27_648.0, 0.0, 150.0).unwrap();
        assert_eq!(range.raw_for(50.0), 9_216.0);
        let linear = Scaling::linear(0.1, -5.0).unwrap();
        assert_eq!(linear.raw_for(20.0), 250.0);
        for s in [range, linear, Scaling::IDENTITY] {
            for eng in [-3.5, 0.0, 72.25] {
                assert!((s.apply(s.raw_for(eng)) - eng).abs() < 1e-9, "{s:?} {eng}");
            }
        }
    }

    #[test]
    fn source_value_decodes_and_scales() {
        let src = Source::new(
            Table::InputRegisters,
            Address::new(10),
            DataType::I16,
            Order::Abcd,
            Scaling::linear(0.1, 0.0).unwrap(),
        )
        .unwrap();
        assert_eq!(src.count(), 1);
        // i16 0xFF9C = -100 (hand-computed two's complement) × 0.1 = -10.
        assert!((src.value(&[0xFF9C]) + 10.0).abs() < 1e-12);
    }

    #[test]
    fn names_deserialize() {
        #[derive(Deserialize)]
        struct T {
            table: Table,
            address: Address,
            data_type: DataType,
            order: Order,
        }
        let t: T = serde_json::from_str(
            r#"{"table":"holding_registers","address":107,"data_type":"f32","order":"CDAB"}"#,
        )
        .unwrap();
        assert_eq!(t.table, Table::HoldingRegisters);
        assert_eq!(t.address, Address::new(107));
        assert_eq!(t.data_type, DataType::F32);
        assert_eq!(t.order, Order::Cdab);
        let err = serde_json::from_str::<T>(
            r#"{"table":"coils","address":400001,"data_type":"bool","order":"ABCD"}"#,
        )
        .err()
        .unwrap();
        assert!(err.to_string().contains("out of range"), "{err}");
    }
}
