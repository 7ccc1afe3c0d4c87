//! Which loop signal a topic feeds: the [`Route`]s of every MQTT source (topic filter, loop
//! signal, [`PayloadFormat`], a mode's automatic values), looked up by topic in a [`TopicMap`].

use super::topic;
use crate::analysis::AutoValues;
use crate::sample::Signal;
use std::collections::HashMap;
use std::sync::Arc;

/// How a payload is written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PayloadFormat {
    /// Plain text holding one number, whitespace around it allowed (`21.5`). For a mode signal,
    /// plain text holding a number or a word (`AUTO`).
    Number,
    /// A JSON object holding the value and optionally its time, or an array of such objects.
    Json(JsonFields),
}

/// The field names of a JSON payload.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct JsonFields {
    /// The value's field (default `value`).
    pub value_field: String,
    /// The timestamp's field (default `time`): an RFC 3339 string or epoch milliseconds. A
    /// message without it is timed by its receipt.
    pub time_field: String,
}

/// One MQTT source: the topic filter it reads and the loop signal its messages feed.
#[derive(Debug, Clone, PartialEq)]
pub struct Route {
    /// An MQTT topic filter (`+` and `#` allowed).
    pub filter: String,
    pub loop_tag: Arc<str>,
    pub signal: Signal,
    pub format: PayloadFormat,
    /// For the mode signal: which values mean automatic.
    pub auto_values: Option<AutoValues>,
}

/// Which loop signal each topic feeds.
///
/// Exact topics are one hash lookup; wildcard filters are then tried in config order (tag, then
/// sp, pv, op, mode). The config refuses filters that overlap, so at most one can match; for
/// hand-built routes that break that rule, the first match wins.
#[derive(Debug, Clone)]
pub struct TopicMap {
    routes: Vec<Route>,
    exact: HashMap<Box<str>, usize>,
    wildcard: Vec<(Box<str>, usize)>,
}

impl TopicMap {
    /// The map of the given sources, in their order (the config's: tag, then sp, pv, op, mode).
    pub fn new(routes: Vec<Route>) -> TopicMap {
        let mut exact = HashMap::new();
        let mut wildcard = Vec::new();
        for (index, r) in routes.iter().enumerate() {
            if r.filter.contains(['+', '#']) {
                wildcard.push((r.filter.as_str().into(), index));
            } else {
                exact.entry(r.filter.as_str().into()).or_insert(index);
            }
        }
        TopicMap {
            routes,
            exact,
            wildcard,
        }
    }

    /// The loop tag, signal and payload format a topic feeds, or `None` when no source's filter
    /// matches it.
    pub fn lookup(&self, topic: &str) -> Option<(Arc<str>, Signal, &PayloadFormat)> {
        self.route(topic)
            .map(|r| (r.loop_tag.clone(), r.signal, &r.format))
    }

    /// The route a topic takes, if any source's filter matches it.
    pub fn route(&self, topic: &str) -> Option<&Route> {
        if !topic::is_valid_topic_name(topic) {
            return None;
        }
        let index = match self.exact.get(topic) {
            Some(&i) => i,
            None => {
                self.wildcard
                    .iter()
                    .find(|(filter, _)| topic::matches(filter, topic))?
                    .1
            }
        };
        self.routes.get(index)
    }

    /// How many sources the map holds.
    pub fn len(&self) -> usize {
        self.routes.len()
    }

    pub fn is_empty(&self) -> bool {
        self.routes.is_empty()
    }
}
