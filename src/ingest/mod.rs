//! Acquisition: from what a source delivers to [`Sample`](crate::sample::Sample)s.
//!
//! - `topic`: MQTT's topic-name and topic-filter rules (matching, validity, overlap), used by the
//!   config at load and by the decoder.
//! - `decode`: which loop signal a topic feeds ([`TopicMap`]) and what a payload says
//!   ([`decode()`]), with a counted [`Rejection`] for everything it refuses. Pure: no I/O, no
//!   clock.

pub mod decode;
pub mod topic;

pub use decode::{Limits, Origin, Rejection, TopicMap, decode};
