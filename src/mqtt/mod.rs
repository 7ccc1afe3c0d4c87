//! MQTT as a source of loop signals: from a broker's messages to
//! [`Sample`](crate::sample::Sample)s.
//!
//! - [`topic`]: MQTT's topic-name and topic-filter rules (matching, validity, overlap), used by
//!   the config at load and by the decoder.
//! - [`routes`]: which loop signal a topic feeds ([`Route`], [`TopicMap`]) and how its payload is
//!   written ([`PayloadFormat`]). The config layer gives the routes; this folder never reads the
//!   config.
//! - [`decode`](mod@decode): what a payload says ([`decode()`]), with a counted [`Rejection`] for
//!   everything it refuses. Pure: no I/O, no clock.
//! - [`source`]: the task that owns the broker connection, hands decoded samples to the writer
//!   and acknowledges a message only once its samples are committed.

pub mod decode;
pub mod routes;
pub mod source;
pub mod topic;

pub use decode::{Limits, Origin, Rejection, decode};
pub use routes::{JsonFields, PayloadFormat, Route, TopicMap};
