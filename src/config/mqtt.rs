//! `[mqtt]`: the broker connection (URL, client id, login, TLS), what headroom publishes, the
//! password kept out of the file ([`Secret`], [`PasswordSource`]), and the topic rules across
//! loops: no two sources on one topic, no overlapping filters, no filter catching our own
//! alerts or status.

use super::error::{Checker, key_path};
use super::loops::LoopConfig;
use super::raw::RawMqtt;
use super::{ConfigError, relative_to};
use crate::mqtt::topic;
use std::collections::{BTreeMap, HashMap};
use std::path::PathBuf;
use std::time::Duration;

/// `[mqtt]`: the broker connection and what headroom publishes.
#[derive(Debug, Clone, PartialEq)]
pub struct MqttSettings {
    /// The URL as written, for messages.
    pub url: String,
    /// Host name or IP address (an IPv6 address without its brackets).
    pub host: String,
    /// The URL's port, or 1883 for `mqtt://` and 8883 for `mqtts://`.
    pub port: u16,
    /// Whether the URL is `mqtts://` (TLS).
    pub tls: bool,
    /// Unique per broker and stable across restarts: the broker keeps the persistent session
    /// (and the QoS 1 messages queued for it) under this id.
    pub client_id: String,
    pub username: Option<String>,
    /// Where the password is read from when connecting; never the password itself.
    pub password_from: Option<PasswordSource>,
    /// CA certificate(s) in PEM for a broker with a private CA (mqtts only), resolved against the
    /// config file's folder when relative.
    pub ca_file: Option<PathBuf>,
    pub keep_alive_s: u16,
    /// Where alerts are published.
    pub alert_topic: String,
    /// Where status is published, if anywhere. With `alert_topic`, the only topics headroom
    /// ever publishes on.
    pub status_topic: Option<String>,
    /// Larger payloads are rejected unread (`oversized_payload`).
    pub max_payload_bytes: usize,
    /// Samples timestamped more than this far ahead of their receipt are rejected
    /// (`future_timestamp`).
    pub max_future_s: u32,
}

const DEFAULT_KEEP_ALIVE_S: u16 = 30;
const DEFAULT_MAX_PAYLOAD_BYTES: usize = 65_536;
/// MQTT's own limit on a packet's remaining length.
const MAX_MAX_PAYLOAD_BYTES: i64 = 268_435_455;
const DEFAULT_MAX_FUTURE_S: u32 = 300;
/// A day: a sample further ahead than that is a clock problem, whatever the site's tolerance.
const MAX_MAX_FUTURE_S: i64 = 86_400;

/// Where the MQTT password comes from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PasswordSource {
    /// The first line of this file (resolved against the config file's folder when relative).
    File(PathBuf),
    /// This environment variable.
    Env(String),
}

/// A password. Its `Debug` and `Display` print `***`, so it cannot leak into logs by accident;
/// [`Secret::expose`] is the one way to the text.
#[derive(Clone, PartialEq, Eq)]
pub struct Secret(String);

impl Secret {
    pub fn new(text: impl Into<String>) -> Secret {
        Secret(text.into())
    }

    /// The secret text, for handing to the MQTT client and nothing else.
    pub fn expose(&self) -> &str {
        &self.0
    }
}

impl std::fmt::Debug for Secret {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("***")
    }
}

impl std::fmt::Display for Secret {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("***")
    }
}

impl MqttSettings {
    /// The password, read now from its file or environment variable (so a rotated password is
    /// picked up at the next connection); `None` when the config names no password source.
    ///
    /// From a file, the password is its first line without the line ending. A missing or
    /// unreadable file, an unset variable, or an empty password is an error; no message ever
    /// contains the password.
    pub fn password(&self) -> Result<Option<Secret>, ConfigError> {
        let (origin, read) = match &self.password_from {
            None => return Ok(None),
            Some(PasswordSource::File(path)) => {
                (format!("file {}", path.display()), password_from_file(path))
            }
            Some(PasswordSource::Env(name)) => (
                format!("environment variable {name}"),
                password_from_env(name),
            ),
        };
        read.map(Some).map_err(|e| ConfigError::Password {
            origin,
            message: e.to_string(),
        })
    }

    pub fn keep_alive(&self) -> Duration {
        Duration::from_secs(u64::from(self.keep_alive_s))
    }

    pub fn max_future_ms(&self) -> i64 {
        i64::from(self.max_future_s) * 1000
    }

    /// The limits every message from this broker must respect.
    pub fn limits(&self) -> crate::mqtt::Limits {
        crate::mqtt::Limits {
            max_payload_bytes: self.max_payload_bytes,
            max_future_ms: self.max_future_ms(),
        }
    }
}

/// Why no password could be read (never the password itself).
#[derive(Debug, thiserror::Error)]
enum NoPassword {
    #[error("{0}")]
    Unreadable(std::io::Error),
    #[error("the first line is empty")]
    EmptyLine,
    #[error("it is empty")]
    Empty,
    #[error("it is not set")]
    NotSet,
    #[error("it is not valid UTF-8")]
    NotUnicode,
}

/// The first line of `path`.
fn password_from_file(path: &std::path::Path) -> Result<Secret, NoPassword> {
    let text = std::fs::read_to_string(path).map_err(NoPassword::Unreadable)?;
    match text.lines().next() {
        Some(line) if !line.is_empty() => Ok(Secret::new(line)),
        _ => Err(NoPassword::EmptyLine),
    }
}

/// The variable's value.
fn password_from_env(name: &str) -> Result<Secret, NoPassword> {
    match std::env::var(name) {
        Ok(v) if !v.is_empty() => Ok(Secret::new(v)),
        Ok(_) => Err(NoPassword::Empty),
        Err(std::env::VarError::NotPresent) => Err(NoPassword::NotSet),
        Err(std::env::VarError::NotUnicode(_)) => Err(NoPassword::NotUnicode),
    }
}

impl Checker<'_> {
    pub(super) fn mqtt(&mut self, raw: RawMqtt) -> MqttSettings {
        let (host, port, tls) = match parse_broker_url(&raw.url) {
            Ok(b) => b,
            Err(e) => {
                self.problem(&["mqtt", "url"], e.to_string());
                (String::new(), 0, false)
            }
        };
        if let Some(message) = client_id_problem(&raw.client_id) {
            self.problem(&["mqtt", "client_id"], message);
        }
        let password_from = self.login(&raw);
        let ca_file = raw.ca_file.as_ref().map(|f| relative_to(self.dir, f));
        if ca_file.is_some() && !tls && !host.is_empty() {
            self.problem(
                &["mqtt", "ca_file"],
                "a CA file only applies to TLS: use an mqtts:// url, or remove ca_file",
            );
        }
        self.published_topics(&raw);
        let (keep_alive_s, max_payload_bytes, max_future_s) = self.broker_numbers(&raw);
        MqttSettings {
            url: raw.url,
            host,
            port,
            tls,
            client_id: raw.client_id,
            username: raw.username,
            password_from,
            ca_file,
            keep_alive_s,
            alert_topic: raw.alert_topic,
            status_topic: raw.status_topic,
            max_payload_bytes,
            max_future_s,
        }
    }

    /// Checks the username and the password keys; where the password will come from.
    fn login(&mut self, raw: &RawMqtt) -> Option<PasswordSource> {
        if let Some(u) = &raw.username
            && (u.is_empty() || u.contains('\0'))
        {
            self.problem(
                &["mqtt", "username"],
                "the username cannot be empty or hold NUL",
            );
        }
        if raw.password.is_some() {
            self.problem(
                &["mqtt", "password"],
                "a password is never written in the config file: put it in a file readable only \
                 by headroom and name it with password_file (its first line is the password), \
                 or name an environment variable with password_env",
            );
        }
        let password_from = match (&raw.password_file, &raw.password_env) {
            (Some(_), Some(_)) => {
                self.problem(
                    &["mqtt", "password_env"],
                    "give either password_file or password_env, not both",
                );
                None
            }
            (Some(f), None) => {
                if f.as_os_str().is_empty() {
                    self.problem(&["mqtt", "password_file"], "the path cannot be empty");
                }
                Some(PasswordSource::File(relative_to(self.dir, f)))
            }
            (None, Some(v)) => {
                if v.is_empty() || v.contains(['=', '\0']) {
                    self.problem(
                        &["mqtt", "password_env"],
                        "must be the name of an environment variable (not empty, no `=`)",
                    );
                }
                Some(PasswordSource::Env(v.clone()))
            }
            (None, None) => None,
        };
        if password_from.is_some() && raw.username.is_none() {
            let key = if raw.password_file.is_some() {
                "password_file"
            } else {
                "password_env"
            };
            self.problem(
                &["mqtt", key],
                "MQTT sends a password only with a username: set username too",
            );
        }
        password_from
    }

    /// The topics headroom publishes on: valid topic names, and status apart from alerts.
    fn published_topics(&mut self, raw: &RawMqtt) {
        if let Some(m) = topic::publish_topic_problem(&raw.alert_topic) {
            self.problem(&["mqtt", "alert_topic"], m);
        }
        if let Some(s) = &raw.status_topic {
            if let Some(m) = topic::publish_topic_problem(s) {
                self.problem(&["mqtt", "status_topic"], m);
            } else if *s == raw.alert_topic {
                self.problem(
                    &["mqtt", "status_topic"],
                    "must differ from alert_topic, so that readers can tell status from alerts",
                );
            }
        }
    }

    /// Keep-alive, payload limit and future tolerance, each with its default, or the default
    /// when out of range (the problem is reported).
    fn broker_numbers(&mut self, raw: &RawMqtt) -> (u16, usize, u32) {
        let keep_alive = raw.keep_alive_s.unwrap_or(i64::from(DEFAULT_KEEP_ALIVE_S));
        self.within(
            &["mqtt", "keep_alive_s"],
            keep_alive,
            1..=i64::from(u16::MAX),
            format_args!("must be a whole number of seconds from 1 to {}", u16::MAX),
        );
        let max_payload = raw
            .max_payload_bytes
            .unwrap_or(DEFAULT_MAX_PAYLOAD_BYTES as i64);
        self.within(
            &["mqtt", "max_payload_bytes"],
            max_payload,
            1..=MAX_MAX_PAYLOAD_BYTES,
            format_args!("must be from 1 to {MAX_MAX_PAYLOAD_BYTES} bytes"),
        );
        let max_future = raw.max_future_s.unwrap_or(i64::from(DEFAULT_MAX_FUTURE_S));
        self.within(
            &["mqtt", "max_future_s"],
            max_future,
            0..=MAX_MAX_FUTURE_S,
            format_args!("must be a whole number of seconds from 0 to {MAX_MAX_FUTURE_S}"),
        );
        (
            u16::try_from(keep_alive).unwrap_or(DEFAULT_KEEP_ALIVE_S),
            usize::try_from(max_payload).unwrap_or(DEFAULT_MAX_PAYLOAD_BYTES),
            u32::try_from(max_future).unwrap_or(DEFAULT_MAX_FUTURE_S),
        )
    }

    /// Topic clashes across loops: a topic used twice, filters that overlap, and filters that
    /// would catch headroom's own alerts or status.
    pub(super) fn topics(
        &mut self,
        loops: &BTreeMap<String, LoopConfig>,
        mqtt: Option<&MqttSettings>,
    ) {
        let filters = signal_filters(loops);
        for clash in clashes(&filters) {
            let (tag, signal, _) = filters[clash.second];
            self.problem(&["loops", tag, signal, "topic"], clash.message(&filters));
        }
        if let Some(m) = mqtt {
            self.own_topics(&filters, m);
        }
    }

    /// Signal filters that would match a topic headroom publishes on.
    fn own_topics(&mut self, filters: &[Filter<'_>], m: &MqttSettings) {
        let ours = std::iter::once(("alert_topic", &m.alert_topic))
            .chain(m.status_topic.iter().map(|s| ("status_topic", s)));
        for (key, own) in ours {
            for &(tag, sig, f) in filters {
                if topic::matches(f, own) {
                    self.problem(
                        &["loops", tag, sig, "topic"],
                        format!(
                            "filter {f} matches mqtt.{key} ({own}): headroom would read its own \
                             messages as samples"
                        ),
                    );
                }
            }
        }
    }
}

/// A signal's topic filter: (loop tag, signal, filter).
type Filter<'a> = (&'a str, &'a str, &'a str);

/// The valid MQTT filters of all loops, in loop and signal order. Invalid ones have their own
/// problem already and take no part in the clash checks.
fn signal_filters(loops: &BTreeMap<String, LoopConfig>) -> Vec<Filter<'_>> {
    loops
        .iter()
        .flat_map(|(tag, l)| {
            l.sources().filter_map(move |(signal, s)| {
                s.as_mqtt()
                    .map(|m| (tag.as_str(), signal.as_str(), m.topic.as_str()))
            })
        })
        .filter(|(_, _, f)| !f.is_empty() && topic::filter_problem(f).is_none())
        .collect()
}

/// Two filters of [`signal_filters`] that one message could match.
struct Clash {
    first: usize,
    second: usize,
    /// A topic both match, when they are not the same topic.
    example: Option<String>,
}

impl Clash {
    /// The problem, said at the second filter.
    fn message(&self, filters: &[Filter<'_>]) -> String {
        let (tag_a, sig_a, a) = filters[self.first];
        let b = filters[self.second].2;
        let first = key_path(&["loops", tag_a, sig_a]);
        match &self.example {
            None => format!("topic {b} is also the topic of {first}: each topic feeds one signal"),
            Some(t) => format!(
                "filter {b} and the filter {a} of {first} both match topics such as {t}, so one \
                 message would feed two signals: make the filters disjoint"
            ),
        }
    }
}

/// Every pair of filters that share a topic: equal exact topics first, then every pair with a
/// wildcard on either side (two exact topics overlap only when equal).
fn clashes(filters: &[Filter<'_>]) -> Vec<Clash> {
    let mut found = Vec::new();
    let mut exact: HashMap<&str, usize> = HashMap::new();
    let wild = |f: &str| f.contains(['+', '#']);
    for (i, &(_, _, f)) in filters.iter().enumerate() {
        if !wild(f) {
            match exact.get(f) {
                Some(&first) => found.push(Clash {
                    first,
                    second: i,
                    example: None,
                }),
                None => {
                    exact.insert(f, i);
                }
            }
        }
    }
    for i in 0..filters.len() {
        for j in i + 1..filters.len() {
            let (a, b) = (filters[i].2, filters[j].2);
            if (wild(a) || wild(b))
                && let Some(example) = topic::overlap(a, b)
            {
                found.push(Clash {
                    first: i,
                    second: j,
                    example: Some(example),
                });
            }
        }
    }
    found
}

/// Why a broker URL is unusable.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
enum BrokerUrlError {
    #[error("the url must start with mqtt:// or mqtts:// (got \"{0}\")")]
    Scheme(String),
    #[error("the url cannot hold credentials: use username with password_file or password_env")]
    Credentials,
    #[error(
        "the url is only a scheme, a host and an optional port, as in \
         mqtts://broker.example:8883 (got \"{0}\")"
    )]
    NotJustHost(String),
    #[error("unclosed [ in the url \"{0}\"")]
    UnclosedBracket(String),
    #[error("unexpected text after ] in the url \"{0}\"")]
    AfterBracket(String),
    #[error("the url has no valid host (got \"{0}\")")]
    Host(String),
    #[error("the port must be a number from 1 to 65535 (got \"{0}\")")]
    Port(String),
}

/// Splits `mqtt://host[:port]` or `mqtts://host[:port]` (an optional trailing `/` allowed) into
/// host, port and whether it is TLS.
fn parse_broker_url(url: &str) -> Result<(String, u16, bool), BrokerUrlError> {
    let (rest, tls) = if let Some(r) = url.strip_prefix("mqtts://") {
        (r, true)
    } else if let Some(r) = url.strip_prefix("mqtt://") {
        (r, false)
    } else {
        return Err(BrokerUrlError::Scheme(url.into()));
    };
    let rest = rest.strip_suffix('/').unwrap_or(rest);
    if rest.contains('@') {
        return Err(BrokerUrlError::Credentials);
    }
    if rest.contains(['/', '?', '#']) {
        return Err(BrokerUrlError::NotJustHost(url.into()));
    }
    let (host, port) = if let Some(v6) = rest.strip_prefix('[') {
        let (host, after) = v6
            .split_once(']')
            .ok_or_else(|| BrokerUrlError::UnclosedBracket(url.into()))?;
        match after {
            "" => (host, None),
            p if p.starts_with(':') => (host, Some(&p[1..])),
            _ => return Err(BrokerUrlError::AfterBracket(url.into())),
        }
    } else {
        match rest.rsplit_once(':') {
            Some((h, p)) => (h, Some(p)),
            None => (rest, None),
        }
    };
    if host.is_empty() || host.contains(|c: char| c.is_whitespace() || c.is_control()) {
        return Err(BrokerUrlError::Host(url.into()));
    }
    let port = match port {
        None if tls => 8883,
        None => 1883,
        Some(p) => match p.parse::<u16>() {
            Ok(p) if p > 0 => p,
            _ => return Err(BrokerUrlError::Port(p.into())),
        },
    };
    Ok((host.to_owned(), port, tls))
}

/// Why a client id is unusable. `+ # /` would make any topic built from it a filter or add
/// levels, and `$` would put it among the broker's own names; MQTT allows 23 characters for
/// sure and most brokers more, so only MQTT's own 65,535-byte limit is enforced.
fn client_id_problem(id: &str) -> Option<String> {
    if id.is_empty() {
        Some("the client id cannot be empty: the persistent session is kept under it".into())
    } else if let Some(c) = id.chars().find(|c| matches!(c, '+' | '#' | '/' | '$')) {
        Some(format!(
            "the client id cannot contain `{c}` (none of + # / $)"
        ))
    } else if id.contains(|c: char| c.is_whitespace() || c.is_control()) {
        Some("the client id cannot contain spaces or control characters".into())
    } else if id.len() > topic::MAX_TOPIC_BYTES {
        Some(format!(
            "the client id can be at most {} bytes",
            topic::MAX_TOPIC_BYTES
        ))
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Config;
    use crate::config::fixture::{PLANT, parse, problems};
    use std::path::Path;

    #[test]
    fn relative_secret_and_ca_paths_are_resolved_against_the_config_folder() {
        let text = PLANT.replace(
            "username = \"headroom\"",
            "username = \"headroom\"\nca_file = \"ca.pem\"",
        );
        let cfg = Config::parse(&text, Path::new("/etc/headroom/headroom.toml")).unwrap();
        let m = cfg.mqtt.unwrap();
        assert_eq!(m.ca_file, Some(PathBuf::from("/etc/headroom/ca.pem")));
        assert_eq!(
            m.password_from,
            Some(PasswordSource::File(PathBuf::from(
                "/etc/headroom/secrets/mqtt-password"
            )))
        );
    }

    #[test]
    fn an_inline_password_is_refused_pointing_to_file_or_env() {
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password = \"hunter2\"",
        );
        let err = problems(&text);
        assert!(err.starts_with("plant.toml:10:"), "{err}");
        assert!(err.contains("mqtt.password:"), "{err}");
        assert!(
            err.contains("password_file") && err.contains("password_env"),
            "{err}"
        );
        assert!(!err.contains("hunter2"), "{err}");
    }

    #[test]
    fn the_password_is_read_from_the_first_line_of_its_file_when_asked() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("pw"), "s3cret word\nsecond line\n").unwrap();
        let cfg_path = dir.path().join("headroom.toml");
        let text = PLANT.replace("secrets/mqtt-password", "pw");
        let cfg = Config::parse(&text, &cfg_path).unwrap();
        let m = cfg.mqtt.unwrap();
        let secret = m.password().unwrap().unwrap();
        assert_eq!(secret.expose(), "s3cret word");
        // Read at call time: a rotated password is seen at the next call.
        std::fs::write(dir.path().join("pw"), "rotated\r\n").unwrap();
        assert_eq!(m.password().unwrap().unwrap().expose(), "rotated");
        std::fs::write(dir.path().join("pw"), "\nx").unwrap();
        let err = m.password().unwrap_err().to_string();
        assert!(err.contains("empty"), "{err}");
        std::fs::remove_file(dir.path().join("pw")).unwrap();
        let err = m.password().unwrap_err().to_string();
        assert!(err.contains("pw"), "{err}");
    }

    #[test]
    fn the_password_can_come_from_the_environment() {
        // PATH is set wherever tests run; no test changes the environment.
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password_env = \"PATH\"",
        );
        let m = parse(&text).unwrap().mqtt.unwrap();
        assert_eq!(
            m.password().unwrap().unwrap().expose(),
            std::env::var("PATH").unwrap()
        );
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password_env = \"HEADROOM_TEST_VARIABLE_THAT_IS_NEVER_SET\"",
        );
        let err = parse(&text).unwrap().mqtt.unwrap().password().unwrap_err();
        assert!(err.to_string().contains("not set"), "{err}");
        // No password source, no password.
        let text = PLANT.replace("password_file = \"secrets/mqtt-password\"\n", "");
        assert!(
            parse(&text)
                .unwrap()
                .mqtt
                .unwrap()
                .password()
                .unwrap()
                .is_none()
        );
    }

    #[test]
    fn a_secret_prints_as_stars() {
        let s = Secret::new("hunter2");
        assert_eq!(format!("{s}"), "***");
        assert_eq!(format!("{s:?}"), "***");
        assert_eq!(format!("{:?}", Some(s)), "Some(***)");
    }

    #[test]
    fn password_sources_need_a_username_and_only_one_of_them() {
        let text = PLANT.replace("username = \"headroom\"\n", "");
        let err = problems(&text);
        assert!(
            err.contains("mqtt.password_file") && err.contains("username"),
            "{err}"
        );
        let text = PLANT.replace(
            "password_file",
            "password_env = \"HEADROOM_PW\"\npassword_file",
        );
        let err = problems(&text);
        assert!(err.contains("not both"), "{err}");
    }

    #[test]
    fn the_url_must_be_mqtt_or_mqtts_with_an_optional_port() {
        let url = |u: &str| parse_broker_url(u);
        assert_eq!(
            url("mqtt://127.0.0.1"),
            Ok(("127.0.0.1".into(), 1883, false))
        );
        assert_eq!(
            url("mqtts://b.example"),
            Ok(("b.example".into(), 8883, true))
        );
        assert_eq!(
            url("mqtt://b.example:2883/"),
            Ok(("b.example".into(), 2883, false))
        );
        assert_eq!(url("mqtts://[::1]:9883"), Ok(("::1".into(), 9883, true)));
        assert_eq!(url("mqtt://[fe80::1]"), Ok(("fe80::1".into(), 1883, false)));
        for bad in [
            "http://b.example",
            "tcp://b.example:1883",
            "b.example:1883",
            "mqtt://",
            "mqtt://:1883",
            "mqtt://b.example:0",
            "mqtt://b.example:99999",
            "mqtt://b.example:port",
            "mqtt://b.example/some/path",
            "mqtt://user:pw@b.example",
            "mqtt://[::1",
        ] {
            assert!(url(bad).is_err(), "{bad}");
        }
        let err = problems(&PLANT.replace("mqtts://broker.plant.example", "ws://broker"));
        assert!(err.starts_with("plant.toml:7:7: mqtt.url:"), "{err}");
        assert!(err.contains("mqtt:// or mqtts://"), "{err}");
    }

    #[test]
    fn client_ids_with_wildcards_slashes_or_dollars_are_refused() {
        for c in ["+", "#", "/", "$"] {
            let text = PLANT.replace("headroom-test", &format!("headroom{c}test"));
            let err = problems(&text);
            assert!(err.starts_with("plant.toml:8:"), "{err}");
            assert!(err.contains("mqtt.client_id"), "{err}");
        }
        let err = problems(&PLANT.replace("headroom-test", ""));
        assert!(err.contains("cannot be empty"), "{err}");
        let err = problems(&PLANT.replace("headroom-test", "headroom test"));
        assert!(err.contains("spaces"), "{err}");
    }

    #[test]
    fn a_ca_file_without_tls_is_refused() {
        let text = PLANT
            .replace("mqtts://", "mqtt://")
            .replace("username", "ca_file = \"ca.pem\"\nusername");
        let err = problems(&text);
        assert!(
            err.contains("mqtt.ca_file") && err.contains("mqtts://"),
            "{err}"
        );
    }

    #[test]
    fn published_topics_are_checked() {
        let err = problems(&PLANT.replace("headroom/test/alerts", "headroom/+/alerts"));
        assert!(err.contains("mqtt.alert_topic"), "{err}");
        let err = problems(&PLANT.replace("headroom/test/status", "headroom/test/alerts"));
        assert!(err.contains("mqtt.status_topic"), "{err}");
    }

    #[test]
    fn a_signal_filter_that_catches_our_own_alerts_is_refused() {
        let text = PLANT.replace("plant/feed/FIC-201/op", "headroom/#");
        let err = problems(&text);
        assert!(err.contains("loops.FIC-201.op.topic"), "{err}");
        assert!(
            err.contains("mqtt.alert_topic") && err.contains("mqtt.status_topic"),
            "{err}"
        );
    }

    #[test]
    fn a_topic_used_by_two_sources_is_refused_naming_both() {
        let text = PLANT.replace("plant/feed/FIC-201/pv", "plant/r1/TIC-101/pv");
        let err = problems(&text);
        assert!(err.contains("loops.TIC-101.pv.topic"), "{err}");
        assert!(err.contains("loops.FIC-201.pv"), "{err}");
        assert!(err.contains("plant/r1/TIC-101/pv"), "{err}");
        assert_eq!(err.lines().count(), 1, "{err}");
    }

    #[test]
    fn overlapping_filters_are_refused_with_a_topic_both_match() {
        let text = PLANT.replace("plant/feed/FIC-201/op", "plant/+/TIC-101/pv");
        let err = problems(&text);
        assert!(err.contains("loops.TIC-101.pv.topic"), "{err}");
        assert!(err.contains("plant/r1/TIC-101/pv"), "{err}");
        assert!(err.contains("two signals"), "{err}");
        // A wildcard that shares no topic with the others is fine.
        let text = PLANT.replace("plant/feed/FIC-201/op", "plant/feed/+/op");
        parse(&text).unwrap();
    }

    #[test]
    fn invalid_filters_are_refused_at_their_line() {
        let err = problems(&PLANT.replace("plant/feed/FIC-201/op", "plant/feed/#/op"));
        assert!(err.starts_with("plant.toml:31:"), "{err}");
        assert!(err.contains("loops.FIC-201.op.topic"), "{err}");
    }

    #[test]
    fn out_of_range_broker_numbers_are_refused() {
        for (key, value) in [
            ("keep_alive_s", "0"),
            ("keep_alive_s", "70000"),
            ("max_payload_bytes", "0"),
            ("max_future_s", "-1"),
            ("max_future_s", "100000"),
        ] {
            let text = PLANT.replace("username", &format!("{key} = {value}\nusername"));
            let err = problems(&text);
            assert!(err.contains(&format!("mqtt.{key}")), "{key}={value}: {err}");
        }
    }
}
