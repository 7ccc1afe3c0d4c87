//! The recorded signals of one loop on a common time base, checked once at the edge so the rest of
//! the analysis never re-checks them.

use thiserror::Error;

/// Setpoint, process variable and controller output of one loop, sampled together.
///
/// Invariants (enforced by [`Series::new`]): all columns have the same length, every value is
/// finite, and time is strictly increasing. Time is in seconds on any origin (epoch seconds from an
/// RFC 3339 export, or seconds since the start of a file); only differences matter, so sample
/// time always comes from the data and never from a clock.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    time_s: Vec<f64>,
    sp: Vec<f64>,
    pv: Vec<f64>,
    op: Vec<f64>,
    /// `true` where the loop is in automatic (or cascade). `None` when no mode signal is known, in
    /// which case the loop is taken to be in automatic throughout.
    auto: Option<Vec<bool>>,
}

/// Why a set of columns cannot form a [`Series`].
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SeriesError {
    #[error(
        "columns have different lengths (time {time}, sp {sp}, pv {pv}, op {op}, mode {mode:?})"
    )]
    LengthMismatch {
        time: usize,
        sp: usize,
        pv: usize,
        op: usize,
        mode: Option<usize>,
    },
    #[error("{column} is not a finite number at sample {index}")]
    NotFinite { column: &'static str, index: usize },
    #[error("time does not increase at sample {index} ({prev} s then {next} s)")]
    TimeNotIncreasing { index: usize, prev: f64, next: f64 },
}

impl Series {
    /// Builds a series, refusing any column that breaks the invariants above.
    pub fn new(
        time_s: Vec<f64>,
        sp: Vec<f64>,
        pv: Vec<f64>,
        op: Vec<f64>,
        auto: Option<Vec<bool>>,
    ) -> Result<Series, SeriesError> {
        let n = time_s.len();
        let mode_len = auto.as_ref().map(Vec::len);
        if sp.len() != n || pv.len() != n || op.len() != n || mode_len.is_some_and(|m| m != n) {
            return Err(SeriesError::LengthMismatch {
                time: n,
                sp: sp.len(),
                pv: pv.len(),
                op: op.len(),
                mode: mode_len,
            });
        }
        for (column, values) in [("time", &time_s), ("sp", &sp), ("pv", &pv), ("op", &op)] {
            if let Some(index) = values.iter().position(|v| !v.is_finite()) {
                return Err(SeriesError::NotFinite { column, index });
            }
        }
        if let Some(i) = time_s.windows(2).position(|w| w[1] <= w[0]) {
            return Err(SeriesError::TimeNotIncreasing {
                index: i + 1,
                prev: time_s[i],
                next: time_s[i + 1],
            });
        }
        Ok(Series {
            time_s,
            sp,
            pv,
            op,
            auto,
        })
    }

    pub fn len(&self) -> usize {
        self.time_s.len()
    }

    pub fn is_empty(&self) -> bool {
        self.time_s.is_empty()
    }

    pub fn time_s(&self) -> &[f64] {
        &self.time_s
    }

    pub fn sp(&self) -> &[f64] {
        &self.sp
    }

    pub fn pv(&self) -> &[f64] {
        &self.pv
    }

    pub fn op(&self) -> &[f64] {
        &self.op
    }

    /// Whether the loop is in automatic at sample `i` (always `true` without a mode signal).
    pub fn is_auto(&self, i: usize) -> bool {
        self.auto.as_ref().is_none_or(|a| a[i])
    }

    pub fn has_mode(&self) -> bool {
        self.auto.is_some()
    }
}
