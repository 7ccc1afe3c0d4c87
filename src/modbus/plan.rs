//! Groups a device's register sources into as few read requests as possible.
//!
//! Pure: no I/O. Sources of one table that are contiguous, or separated by at most `max_gap`
//! unused elements, share a request as long as the request stays within the per-request limit
//! (125 registers or 2000 bits by the Modbus V1.1b3 specification, or less if a device needs it).
//! Unused registers inside a request are read and ignored; a device whose map has holes that
//! answer "illegal data address" needs `max_gap = 0`.
//!
//! A [`ReadRequest`] can only name a table, a start and a count, and each table has exactly one
//! read function code, so a plan cannot describe a write.

use super::registers::{Address, RegisterError, Table};
use std::fmt;
use thiserror::Error;

/// The elements one source occupies: `count` registers (or bits) of `table` from `address`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Span {
    pub table: Table,
    pub address: Address,
    pub count: u16,
}

impl fmt::Display for Span {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.count == 0 {
            return write!(f, "{} {} (empty)", self.table, self.address);
        }
        let last = u32::from(self.address.get()) + u32::from(self.count) - 1;
        write!(f, "{} {}-{}", self.table, self.address, last)
    }
}

/// Why a set of sources cannot be planned. Sources are named by their index in the input.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum PlanError {
    #[error("source #{index} ({span}) overlaps source #{other} ({other_span})")]
    Overlap {
        index: usize,
        span: Span,
        other: usize,
        other_span: Span,
    },
    #[error("source #{index} has a count of 0")]
    Empty { index: usize },
    #[error("source #{index} ({span}) is longer than one request may read ({limit})")]
    TooLong {
        index: usize,
        span: Span,
        limit: u16,
    },
    #[error("source #{index}: {error}")]
    OutOfRange { index: usize, error: RegisterError },
    #[error("{0}")]
    Limits(&'static str),
    #[error("a read of {count} {table} from {start} is not a valid request: {why}")]
    BadRequest {
        table: Table,
        start: Address,
        count: u32,
        why: &'static str,
    },
}

/// How requests may be formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    max_registers: u16,
    max_bits: u16,
    max_gap: u16,
}

impl Default for Limits {
    /// The protocol's limits (125 registers, 2000 bits) and no unused registers read.
    fn default() -> Limits {
        Limits {
            max_registers: Table::HoldingRegisters.protocol_max(),
            max_bits: Table::Coils.protocol_max(),
            max_gap: 0,
        }
    }
}

impl Limits {
    /// `max_registers` 1–125 per register request, `max_bits` 1–2000 per bit request, and at
    /// most `max_gap` unused elements read between two sources in one request.
    pub fn new(max_registers: u16, max_bits: u16, max_gap: u16) -> Result<Limits, PlanError> {
        if !(1..=Table::HoldingRegisters.protocol_max()).contains(&max_registers) {
            return Err(PlanError::Limits(
                "max registers per request must be 1-125 (Modbus V1.1b3 §6.3)",
            ));
        }
        if !(1..=Table::Coils.protocol_max()).contains(&max_bits) {
            return Err(PlanError::Limits(
                "max bits per request must be 1-2000 (Modbus V1.1b3 §6.1)",
            ));
        }
        Ok(Limits {
            max_registers,
            max_bits,
            max_gap,
        })
    }

    /// The protocol's limits with the given gap.
    pub fn with_gap(max_gap: u16) -> Limits {
        Limits {
            max_gap,
            ..Limits::default()
        }
    }

    pub fn max_gap(&self) -> u16 {
        self.max_gap
    }

    /// Largest request for a table.
    pub fn max_for(&self, table: Table) -> u16 {
        if table.is_bits() {
            self.max_bits
        } else {
            self.max_registers
        }
    }
}

/// One read: `count` elements of `table` from `start`, sent with the table's read function code.
/// Only [`ReadRequest::new`] and [`plan`] make them, and both check the protocol limits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReadRequest {
    table: Table,
    start: Address,
    count: u16,
}

impl ReadRequest {
    /// Checks `count` (1–125 registers or 1–2000 bits) and that the read ends at or below 65535.
    pub fn new(table: Table, start: Address, count: u16) -> Result<ReadRequest, PlanError> {
        let bad = |why| PlanError::BadRequest {
            table,
            start,
            count: u32::from(count),
            why,
        };
        if count == 0 {
            return Err(bad("count is 0"));
        }
        if count > table.protocol_max() {
            return Err(bad("more than the protocol allows in one request"));
        }
        start
            .last_of(count, table)
            .map_err(|_| bad("runs past address 65535"))?;
        Ok(ReadRequest {
            table,
            start,
            count,
        })
    }

    pub fn table(&self) -> Table {
        self.table
    }

    pub fn start(&self) -> Address {
        self.start
    }

    pub fn count(&self) -> u16 {
        self.count
    }

    /// The read function code this request is sent with (1–4).
    pub fn function_code(&self) -> u8 {
        self.table.read_function_code()
    }
}

impl fmt::Display for ReadRequest {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let span = Span {
            table: self.table,
            address: self.start,
            count: self.count,
        };
        write!(f, "FC{} {span}", self.function_code())
    }
}

/// Where one source's elements land: in response `request`, from `offset`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Placement {
    pub request: usize,
    pub offset: usize,
    pub count: usize,
}

/// The requests for one device, and for each source (in input order) where its values are.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Plan {
    pub requests: Vec<ReadRequest>,
    pub placements: Vec<Placement>,
}

impl Plan {
    /// The elements of source `index`, cut from the responses of all requests (in plan order).
    pub fn slice<'a>(&self, index: usize, responses: &'a [Vec<u16>]) -> &'a [u16] {
        let p = self.placements[index];
        &responses[p.request][p.offset..p.offset + p.count]
    }
}

/// Checks each span on its own: not empty, inside the address space, within one request's limit.
fn check(spans: &[Span], limits: Limits) -> Result<(), PlanError> {
    for (index, s) in spans.iter().enumerate() {
        if s.count == 0 {
            return Err(PlanError::Empty { index });
        }
        s.address
            .last_of(s.count, s.table)
            .map_err(|error| PlanError::OutOfRange { index, error })?;
        if s.count > limits.max_for(s.table) {
            return Err(PlanError::TooLong {
                index,
                span: *s,
                limit: limits.max_for(s.table),
            });
        }
    }
    Ok(())
}

/// Plans the fewest requests for `spans` under `limits`.
///
/// Requests come out ordered by table (coils, discrete inputs, input registers, holding
/// registers) and then by address. Within a table, sources sorted by address are taken greedily:
/// a source joins the current request when the unused gap before it is at most `max_gap` and the
/// request stays within the limit. Because a request is one contiguous range, any plan must cover
/// the sorted sources in consecutive runs, and extending each run as far as possible never needs
/// more runs than any other choice, so the greedy plan is minimal.
pub fn plan(spans: &[Span], limits: Limits) -> Result<Plan, PlanError> {
    check(spans, limits)?;
    let mut order: Vec<usize> = (0..spans.len()).collect();
    order.sort_by_key(|&i| (spans[i].table, spans[i].address, i));

    let mut requests: Vec<ReadRequest> = Vec::new();
    let mut placements = vec![
        Placement {
            request: 0,
            offset: 0,
            count: 0
        };
        spans.len()
    ];
    // The open request: table, start, end (exclusive), and the source that ends furthest.
    let mut open: Option<(Table, u32, u32, usize)> = None;
    let mut members: Vec<usize> = Vec::new();

    let close = |open: (Table, u32, u32, usize),
                 members: &mut Vec<usize>,
                 requests: &mut Vec<ReadRequest>,
                 placements: &mut [Placement]| {
        let (table, start, end, _) = open;
        let request = requests.len();
        requests.push(ReadRequest {
            table,
            start: Address::new(start as u16),
            count: (end - start) as u16,
        });
        for i in members.drain(..) {
            placements[i] = Placement {
                request,
                offset: (u32::from(spans[i].address.get()) - start) as usize,
                count: usize::from(spans[i].count),
            };
        }
    };

    for &i in &order {
        let s = spans[i];
        let start = u32::from(s.address.get());
        let end = start + u32::from(s.count);
        if let Some((table, r_start, r_end, last)) = open {
            if table == s.table {
                if start < r_end {
                    return Err(PlanError::Overlap {
                        index: i.max(last),
                        span: spans[i.max(last)],
                        other: i.min(last),
                        other_span: spans[i.min(last)],
                    });
                }
                let gap = start - r_end;
                let fits = end - r_start <= u32::from(limits.max_for(table));
                if gap <= u32::from(limits.max_gap) && fits {
                    open = Some((table, r_start, end, i));
                    members.push(i);
                    continue;
                }
            }
            close(
                (table, r_start, r_end, last),
                &mut members,
                &mut requests,
                &mut placements,
            );
        }
        open = Some((s.table, start, end, i));
        members.push(i);
    }
    if let Some(o) = open {
        close(o, &mut members, &mut requests, &mut placements);
    }
    Ok(Plan {
        requests,
        placements,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hr(address: u16, count: u16) -> Span {
        Span {
            table: Table::HoldingRegisters,
            address: Address::new(address),
            count,
        }
    }

    fn ir(address: u16, count: u16) -> Span {
        Span {
            table: Table::InputRegisters,
            address: Address::new(address),
            count,
        }
    }

    fn req(r: &ReadRequest) -> (Table, u16, u16) {
        (r.table(), r.start().get(), r.count())
    }

    #[test]
    fn fifty_registers_in_one_request() {
        // 25 f32 values back to back: 50 registers.
        let spans: Vec<Span> = (0..25).map(|k| hr(100 + 2 * k, 2)).collect();
        let p = plan(&spans, Limits::default()).unwrap();
        assert_eq!(p.requests.len(), 1);
        assert_eq!(req(&p.requests[0]), (Table::HoldingRegisters, 100, 50));
        assert_eq!(p.requests[0].function_code(), 3);
        assert_eq!(
            p.placements[7],
            Placement {
                request: 0,
                offset: 14,
                count: 2
            }
        );
    }

    #[test]
    fn fifty_single_registers_given_out_of_order() {
        let spans: Vec<Span> = (0..50).rev().map(|k| ir(k, 1)).collect();
        let p = plan(&spans, Limits::default()).unwrap();
        assert_eq!(p.requests.len(), 1);
        assert_eq!(req(&p.requests[0]), (Table::InputRegisters, 0, 50));
        // Source 0 is address 49.
        assert_eq!(p.placements[0].offset, 49);
        let responses = vec![(0..50).collect::<Vec<u16>>()];
        assert_eq!(p.slice(0, &responses), &[49]);
        assert_eq!(p.slice(49, &responses), &[0]);
    }

    #[test]
    fn two_tables_two_requests() {
        // Same addresses in two tables never merge.
        let spans = [hr(0, 2), ir(0, 2), hr(2, 2), ir(2, 1)];
        let p = plan(&spans, Limits::default()).unwrap();
        assert_eq!(
            p.requests.iter().map(req).collect::<Vec<_>>(),
            vec![
                (Table::InputRegisters, 0, 3),
                (Table::HoldingRegisters, 0, 4)
            ]
        );
        assert_eq!(p.requests[0].function_code(), 4);
        assert_eq!(p.placements[0].request, 1);
        assert_eq!(p.placements[1].request, 0);
        assert_eq!(p.placements[2].offset, 2);
    }

    #[test]
    fn gaps_up_to_max_gap_are_bridged() {
        // 0-1, then 5 unused (2..=6), then 7-8, then 10 unused (9..=18), then 19.
        let spans = [hr(0, 2), hr(7, 2), hr(19, 1)];
        let no_gap = plan(&spans, Limits::default()).unwrap();
        assert_eq!(no_gap.requests.len(), 3);
        let gap5 = plan(&spans, Limits::with_gap(5)).unwrap();
        assert_eq!(
            gap5.requests.iter().map(req).collect::<Vec<_>>(),
            vec![
                (Table::HoldingRegisters, 0, 9),
                (Table::HoldingRegisters, 19, 1)
            ]
        );
        let gap9 = plan(&spans, Limits::with_gap(9)).unwrap();
        assert_eq!(gap9.requests.len(), 2);
        let gap10 = plan(&spans, Limits::with_gap(10)).unwrap();
        assert_eq!(gap10.requests.len(), 1);
        assert_eq!(req(&gap10.requests[0]), (Table::HoldingRegisters, 0, 20));
        assert_eq!(gap10.placements[2].offset, 19);
    }

    #[test]
    fn adjacent_sources_need_no_gap() {
        let p = plan(&[hr(10, 2), hr(12, 1)], Limits::with_gap(0)).unwrap();
        assert_eq!(p.requests.len(), 1);
        assert_eq!(req(&p.requests[0]), (Table::HoldingRegisters, 10, 3));
    }

    #[test]
    fn the_125_register_limit_splits_requests() {
        // 126 contiguous single registers: 125 + 1.
        let spans: Vec<Span> = (0..126).map(|k| hr(k, 1)).collect();
        let p = plan(&spans, Limits::default()).unwrap();
        assert_eq!(
            p.requests.iter().map(req).collect::<Vec<_>>(),
            vec![
                (Table::HoldingRegisters, 0, 125),
                (Table::HoldingRegisters, 125, 1)
            ]
        );
        // Exactly 125 fits in one.
        let p = plan(&spans[..125], Limits::default()).unwrap();
        assert_eq!(p.requests.len(), 1);
        // A two-register value is never split across requests: 62 f32 (124) + one more.
        let spans: Vec<Span> = (0..63).map(|k| hr(2 * k, 2)).collect();
        let p = plan(&spans, Limits::default()).unwrap();
        assert_eq!(
            p.requests.iter().map(req).collect::<Vec<_>>(),
            vec![
                (Table::HoldingRegisters, 0, 124),
                (Table::HoldingRegisters, 124, 2)
            ]
        );
        for r in &p.requests {
            assert!(r.count() <= 125);
        }
    }

    #[test]
    fn a_smaller_device_limit_is_honoured() {
        let spans: Vec<Span> = (0..10).map(|k| hr(k, 1)).collect();
        let p = plan(&spans, Limits::new(4, 2000, 0).unwrap()).unwrap();
        assert_eq!(
            p.requests.iter().map(|r| r.count()).collect::<Vec<_>>(),
            vec![4, 4, 2]
        );
        assert!(Limits::new(0, 2000, 0).is_err());
        assert!(Limits::new(126, 2000, 0).is_err());
        assert!(Limits::new(125, 2001, 0).is_err());
        let err = plan(&[hr(0, 4)], Limits::new(2, 2000, 0).unwrap()).unwrap_err();
        assert!(matches!(err, PlanError::TooLong { index: 0, .. }), "{err}");
    }

    #[test]
    fn bits_group_up_to_2000() {
        let coil = |a: u16| Span {
            table: Table::Coils,
            address: Address::new(a),
            count: 1,
        };
        let p = plan(&[coil(0), coil(1999)], Limits::with_gap(2000)).unwrap();
        assert_eq!(p.requests.len(), 1);
        assert_eq!(req(&p.requests[0]), (Table::Coils, 0, 2000));
        assert_eq!(p.requests[0].function_code(), 1);
        let p = plan(&[coil(0), coil(2000)], Limits::with_gap(2000)).unwrap();
        assert_eq!(p.requests.len(), 2);
    }

    #[test]
    fn overlaps_are_rejected_naming_both_sources() {
        let err = plan(&[hr(10, 2), ir(11, 2), hr(11, 2)], Limits::default()).unwrap_err();
        assert_eq!(
            err.to_string(),
            "source #2 (holding registers 11-12) overlaps source #0 (holding registers 10-11)"
        );
        // A long source swallowing a later one is caught too (same start).
        let err = plan(&[hr(0, 4), hr(0, 1)], Limits::default()).unwrap_err();
        assert!(matches!(err, PlanError::Overlap { .. }), "{err}");
        // Duplicates are overlaps.
        assert!(plan(&[ir(5, 1), ir(5, 1)], Limits::default()).is_err());
    }

    #[test]
    fn bad_spans_are_rejected() {
        assert_eq!(
            plan(&[hr(1, 0)], Limits::default()).unwrap_err(),
            PlanError::Empty { index: 0 }
        );
        let err = plan(&[hr(0, 1), hr(65535, 2)], Limits::default()).unwrap_err();
        assert!(
            matches!(err, PlanError::OutOfRange { index: 1, .. }),
            "{err}"
        );
        // The very top of the address space is fine.
        let p = plan(&[hr(65534, 2)], Limits::default()).unwrap();
        assert_eq!(req(&p.requests[0]), (Table::HoldingRegisters, 65534, 2));
    }

    #[test]
    fn spans_display_their_range() {
        assert_eq!(hr(107, 3).to_string(), "holding registers 107-109");
        assert_eq!(hr(0, 0).to_string(), "holding registers 0 (empty)");
    }

    #[test]
    fn no_sources_no_requests() {
        let p = plan(&[], Limits::default()).unwrap();
        assert!(p.requests.is_empty());
    }

    #[test]
    fn read_requests_are_checked() {
        let t = Table::InputRegisters;
        assert!(ReadRequest::new(t, Address::new(0), 125).is_ok());
        assert!(ReadRequest::new(t, Address::new(0), 126).is_err());
        assert!(ReadRequest::new(t, Address::new(0), 0).is_err());
        assert!(ReadRequest::new(t, Address::new(65500), 100).is_err());
        assert!(ReadRequest::new(Table::DiscreteInputs, Address::new(0), 2000).is_ok());
        let r = ReadRequest::new(t, Address::new(8), 1).unwrap();
        assert_eq!(r.to_string(), "FC4 input registers 8-8");
    }
}
