//! MQTT as a source of loop signals: from a broker's messages to
//! [`Sample`](crate::sample::Sample)s.
//!
//! - [`topic`]: MQTT's topic-name and topic-filter rules (matching, validity, overlap), used by
//!   the config at load and by the decoder.
//! - [`decode`](mod@decode): which loop signal a topic feeds ([`TopicMap`]) and what a payload
//!   says ([`decode()`]), with a counted [`Rejection`] for everything it refuses. Pure: no I/O,
//!   no clock.
//! - [`source`]: the task that owns the broker connection, hands decoded samples to the writer
//!   and acknowledges a message only once its samples are committed.

pub mod decode;
pub mod source;
pub mod topic;

pub use decode::{Limits, Origin, Rejection, TopicMap, decode};
