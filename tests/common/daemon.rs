//! The daemon as the tests meet it: a real `headroom run` process with its own temp directory,
//! configuration, store and log, plus waiting for conditions and reading the store back.

use super::headroom_bin;
use headroom::sample::Signal;
use headroom::store::Store;
use std::collections::BTreeSet;
use std::ffi::OsStr;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{ExitStatus, Stdio};
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;
use tokio::process::{Child, Command};

/// How often conditions are polled.
const POLL: Duration = Duration::from_millis(50);

/// How long a daemon may take to exit after SIGTERM before the test calls it hung. The daemon
/// itself waits up to 3 s for its last acknowledgements and up to 5 s in a reconnect backoff;
/// the rest is slack for a loaded CI machine.
pub const STOP_DEADLINE: Duration = Duration::from_secs(30);

/// A name no other test in this run (or a concurrent run) uses: for client ids and topics.
pub fn unique(name: &str) -> String {
    static NEXT: AtomicU64 = AtomicU64::new(0);
    format!(
        "{name}-{}-{}",
        std::process::id(),
        NEXT.fetch_add(1, Ordering::Relaxed)
    )
}

/// Polls `probe` until it returns `Ok`, or fails the test at the deadline with what it was
/// waiting for and the last state the probe described.
pub async fn eventually<T>(
    what: &str,
    within: Duration,
    mut probe: impl AsyncFnMut() -> Result<T, String>,
) -> T {
    let deadline = tokio::time::Instant::now() + within;
    loop {
        match probe().await {
            Ok(v) => return v,
            Err(state) => {
                if tokio::time::Instant::now() >= deadline {
                    panic!("gave up after {within:?} waiting for {what}; last seen: {state}");
                }
            }
        }
        tokio::time::sleep(POLL).await;
    }
}

/// One test's files: the config, the store and the daemon's log, in a temp directory.
pub struct Workspace {
    dir: tempfile::TempDir,
}

impl Workspace {
    pub fn new(name: &str) -> Workspace {
        Workspace {
            dir: tempfile::Builder::new()
                .prefix(&format!("headroom-{name}-"))
                .tempdir()
                .expect("temp dir"),
        }
    }

    pub fn path(&self) -> &Path {
        self.dir.path()
    }

    pub fn config_path(&self) -> PathBuf {
        self.dir.path().join("headroom.toml")
    }

    /// The store, as the written config names it (relative to the config's folder).
    pub fn db_path(&self) -> PathBuf {
        self.dir.path().join("store.db")
    }

    /// Writes the config and returns its path.
    pub fn write_config(&self, config: &TestConfig) -> PathBuf {
        let path = self.config_path();
        std::fs::write(&path, config.to_toml()).expect("write the config");
        path
    }
}

/// The topics one loop's controller publishes on.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LoopTopics {
    pub sp: String,
    pub pv: String,
    pub op: String,
}

impl LoopTopics {
    pub fn new(prefix: &str, tag: &str) -> LoopTopics {
        LoopTopics {
            sp: format!("{prefix}/{tag}/sp"),
            pv: format!("{prefix}/{tag}/pv"),
            op: format!("{prefix}/{tag}/op"),
        }
    }

    pub fn of(&self, signal: Signal) -> &str {
        match signal {
            Signal::Sp => &self.sp,
            Signal::Pv => &self.pv,
            Signal::Op => &self.op,
            Signal::Mode => panic!("test loops have no mode topic"),
        }
    }

    pub fn all(&self) -> [&str; 3] {
        [&self.sp, &self.pv, &self.op]
    }
}

/// One loop of a test config: JSON sources on its topics (the pv source may be a filter).
#[derive(Debug, Clone)]
pub struct TestLoop {
    pub tag: String,
    pub topics: LoopTopics,
    /// The filter the pv source subscribes to; `topics.pv` when `None`.
    pub pv_filter: Option<String>,
    pub op_min: f64,
    pub op_max: f64,
    pub expected_period_s: f64,
    pub settle_band_pct: f64,
    pub settle_within_s: f64,
    pub max_overshoot_pct: Option<f64>,
    /// `stale_after_periods`; the daemon's default when `None`.
    pub stale_after_periods: Option<f64>,
}

impl TestLoop {
    /// A loop with an OP range of 0–100 %, a sample every 2 s and a 600 s spec.
    pub fn new(tag: &str, topics: LoopTopics) -> TestLoop {
        TestLoop {
            tag: tag.into(),
            topics,
            pv_filter: None,
            op_min: 0.0,
            op_max: 100.0,
            expected_period_s: 2.0,
            settle_band_pct: 2.0,
            settle_within_s: 600.0,
            max_overshoot_pct: None,
            stale_after_periods: None,
        }
    }
}

/// The usual files of a daemon test: a workspace holding the written config for one loop on
/// unique topics, and the store's path.
pub struct LoopRig {
    pub ws: Workspace,
    pub topics: LoopTopics,
    pub cfg: TestConfig,
    pub config: PathBuf,
    pub db: PathBuf,
}

impl LoopRig {
    /// One loop `tag` with [`TestLoop::new`]'s settings, watched on the broker at `port`; `name`
    /// names the workspace, the topics' prefix and the client.
    pub fn new(port: u16, name: &str, tag: &str) -> LoopRig {
        LoopRig::with(TestConfig::new(port, name), tag, |l| l)
    }

    /// `cfg` (named `name` by [`TestConfig::new`]) with one more loop `tag`: [`TestLoop::new`]'s
    /// settings changed by `shape`.
    pub fn with(
        mut cfg: TestConfig,
        tag: &str,
        shape: impl FnOnce(TestLoop) -> TestLoop,
    ) -> LoopRig {
        let name = cfg.name.clone();
        let ws = Workspace::new(&name);
        let topics = LoopTopics::new(&format!("plant/{}", unique(&name)), tag);
        cfg.loops.push(shape(TestLoop::new(tag, topics.clone())));
        let config = ws.write_config(&cfg);
        LoopRig {
            db: ws.db_path(),
            ws,
            topics,
            cfg,
            config,
        }
    }
}

/// Where the daemon reads its MQTT password from.
#[derive(Debug, Clone)]
pub enum PasswordFrom {
    File(PathBuf),
    Env(String),
}

/// A daemon configuration for tests, written as the TOML a user would write.
#[derive(Debug, Clone)]
pub struct TestConfig {
    /// What the test calls itself: the client id and the alert and status topics start with it.
    pub name: String,
    pub port: u16,
    pub client_id: String,
    pub alert_topic: String,
    pub status_topic: String,
    /// Large enough for the test's timestamps; samples this far past their receipt are refused.
    pub max_future_s: u32,
    pub max_payload_bytes: Option<usize>,
    pub username: Option<String>,
    pub password: Option<PasswordFrom>,
    /// `mqtts://` instead of `mqtt://` (then `port` is the broker's TLS listener).
    pub tls: bool,
    /// The CA file that verifies the broker's certificate (mqtts only).
    pub ca_file: Option<PathBuf>,
    pub loops: Vec<TestLoop>,
}

impl TestConfig {
    /// A config for a broker on `port` with a unique client id and unique alert/status topics.
    pub fn new(port: u16, name: &str) -> TestConfig {
        let id = unique(name);
        TestConfig {
            name: name.into(),
            port,
            alert_topic: format!("headroom-test/{id}/alerts"),
            status_topic: format!("headroom-test/{id}/status"),
            client_id: format!("headroom-{id}"),
            max_future_s: 300,
            max_payload_bytes: None,
            username: None,
            password: None,
            tls: false,
            ca_file: None,
            loops: Vec::new(),
        }
    }

    pub fn to_toml(&self) -> String {
        let mut t = String::new();
        let q = |s: &str| toml_string(s);
        let _ = writeln!(t, "[store]\npath = \"store.db\"\n");
        let _ = writeln!(t, "[mqtt]");
        let scheme = if self.tls { "mqtts" } else { "mqtt" };
        let _ = writeln!(t, "url = \"{scheme}://127.0.0.1:{}\"", self.port);
        if let Some(ca) = &self.ca_file {
            let _ = writeln!(t, "ca_file = {}", q(&ca.display().to_string()));
        }
        let _ = writeln!(t, "client_id = {}", q(&self.client_id));
        if let Some(u) = &self.username {
            let _ = writeln!(t, "username = {}", q(u));
        }
        match &self.password {
            Some(PasswordFrom::File(p)) => {
                let _ = writeln!(t, "password_file = {}", q(&p.display().to_string()));
            }
            Some(PasswordFrom::Env(v)) => {
                let _ = writeln!(t, "password_env = {}", q(v));
            }
            None => {}
        }
        let _ = writeln!(t, "keep_alive_s = 5");
        let _ = writeln!(t, "alert_topic = {}", q(&self.alert_topic));
        let _ = writeln!(t, "status_topic = {}", q(&self.status_topic));
        let _ = writeln!(t, "max_future_s = {}", self.max_future_s);
        if let Some(b) = self.max_payload_bytes {
            let _ = writeln!(t, "max_payload_bytes = {b}");
        }
        for l in &self.loops {
            let _ = writeln!(t, "\n[loops.{}]", q(&l.tag));
            let _ = writeln!(t, "op_min = {:?}\nop_max = {:?}", l.op_min, l.op_max);
            let _ = writeln!(t, "expected_period_s = {:?}", l.expected_period_s);
            if let Some(n) = l.stale_after_periods {
                let _ = writeln!(t, "stale_after_periods = {n:?}");
            }
            let _ = writeln!(t, "[loops.{}.spec]", q(&l.tag));
            let _ = writeln!(t, "settle_band_pct = {:?}", l.settle_band_pct);
            let _ = writeln!(t, "settle_within_s = {:?}", l.settle_within_s);
            if let Some(o) = l.max_overshoot_pct {
                let _ = writeln!(t, "max_overshoot_pct = {o:?}");
            }
            let pv = l.pv_filter.as_deref().unwrap_or(&l.topics.pv);
            for (key, topic) in [
                ("sp", l.topics.sp.as_str()),
                ("pv", pv),
                ("op", &l.topics.op),
            ] {
                let _ = writeln!(
                    t,
                    "[loops.{}.{key}]\ntopic = {}\nformat = \"json\"",
                    q(&l.tag),
                    q(topic)
                );
            }
        }
        t
    }
}

fn toml_string(s: &str) -> String {
    // serde_json's escaping is valid TOML basic-string escaping for everything we write.
    serde_json::to_string(s).expect("a string serializes")
}

/// `headroom run` as a child process: RUST_LOG=info, stderr appended to `daemon.log` beside
/// the config.
pub struct DaemonProcess {
    child: Child,
    log_path: PathBuf,
    /// Where this run's part of the log starts.
    log_from: usize,
}

impl DaemonProcess {
    pub fn start(config: &Path) -> DaemonProcess {
        DaemonProcess::start_with_env(config, &[])
    }

    pub fn start_with_env(config: &Path, env: &[(&str, &str)]) -> DaemonProcess {
        let log_path = config.with_file_name("daemon.log");
        let mut log = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(&log_path)
            .expect("open the daemon log");
        // A marker between runs, for people reading the file; this run's part starts after it.
        use std::io::Write;
        writeln!(log, "---- test harness: starting headroom run ----").expect("write the log");
        let log_from = log.metadata().expect("log metadata").len() as usize;
        let child = Command::new(headroom_bin())
            .arg("run")
            .arg("--config")
            .arg(config)
            .env("RUST_LOG", "info")
            .envs(env.iter().copied())
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(log)
            .kill_on_drop(true)
            .spawn()
            .expect("start headroom run");
        DaemonProcess {
            child,
            log_path,
            log_from,
        }
    }

    /// Starts the daemon and waits until it is connected and subscribed.
    pub async fn start_subscribed(config: &Path) -> DaemonProcess {
        let mut daemon = DaemonProcess::start(config);
        daemon.wait_subscribed().await;
        daemon
    }

    /// This run's log so far.
    pub fn log(&self) -> String {
        let all = self.full_log();
        all.get(self.log_from..).unwrap_or("").to_string()
    }

    /// The log of every run that shared this config's folder.
    pub fn full_log(&self) -> String {
        String::from_utf8_lossy(&std::fs::read(&self.log_path).unwrap_or_default()).into_owned()
    }

    pub fn is_running(&mut self) -> bool {
        self.child.try_wait().expect("poll the daemon").is_none()
    }

    /// Waits until this run's log holds `needle`; fails early if the daemon exits.
    pub async fn wait_for_log(&mut self, needle: &str, within: Duration) {
        eventually(
            &format!("the daemon to log {needle:?}"),
            within,
            async || {
                let log = self.log();
                if log.contains(needle) {
                    return Ok(());
                }
                if let Some(status) = self.child.try_wait().expect("poll the daemon") {
                    panic!(
                        "the daemon exited ({status}) before logging {needle:?}; its log:\n{log}"
                    );
                }
                Err(tail(&log, 15))
            },
        )
        .await
    }

    /// Waits until the daemon is connected and subscribed.
    pub async fn wait_subscribed(&mut self) {
        self.wait_for_log("subscribed", Duration::from_secs(30))
            .await;
    }

    /// SIGTERM, then waits for the exit (failing the test if it takes longer than
    /// [`STOP_DEADLINE`]).
    pub async fn sigterm(&mut self) -> ExitStatus {
        super::broker::send_signal(&self.child, "TERM");
        match tokio::time::timeout(STOP_DEADLINE, self.child.wait()).await {
            Ok(status) => status.expect("wait for the daemon"),
            Err(_) => panic!(
                "the daemon did not exit within {STOP_DEADLINE:?} of SIGTERM; its log:\n{}",
                tail(&self.log(), 40)
            ),
        }
    }

    /// SIGKILL, then reaps the process.
    pub async fn sigkill(&mut self) {
        self.child.start_kill().expect("SIGKILL the daemon");
        let _ = self.child.wait().await;
    }
}

/// The last `n` lines of a text.
pub fn tail(text: &str, n: usize) -> String {
    let lines: Vec<&str> = text.lines().collect();
    lines[lines.len().saturating_sub(n)..].join("\n")
}

/// A stored sample's identity: the store's primary key in readable form.
pub type SampleKey = (String, Signal, i64);

/// How many samples the store holds; `Err` (with why) while the daemon has not created it yet.
pub async fn sample_count(db: &Path) -> Result<u64, String> {
    let store = Store::open_read_only(db).await.map_err(|e| e.to_string())?;
    let n = store.sample_count().await.map_err(|e| e.to_string());
    store.close().await;
    n
}

/// Every stored sample key of these loops' sp, pv and op.
pub async fn stored_keys(db: &Path, tags: &[&str]) -> Result<BTreeSet<SampleKey>, String> {
    let store = Store::open_read_only(db).await.map_err(|e| e.to_string())?;
    let mut keys = BTreeSet::new();
    for tag in tags {
        for signal in [Signal::Sp, Signal::Pv, Signal::Op] {
            let rows = store
                .samples(tag, signal, i64::MIN, i64::MAX)
                .await
                .map_err(|e| e.to_string())?;
            keys.extend(rows.into_iter().map(|(t, _)| (tag.to_string(), signal, t)));
        }
    }
    store.close().await;
    Ok(keys)
}

/// Waits until the store holds exactly `n` samples (a test that finds more fails at the deadline).
pub async fn wait_for_samples(db: &Path, n: usize, within: Duration) {
    eventually(&format!("{n} samples in the store"), within, async || {
        let stored = sample_count(db).await?;
        if stored as usize == n {
            Ok(())
        } else {
            Err(format!("{stored} of {n} stored"))
        }
    })
    .await;
}

/// Opens the store read-only (for checks after the daemon has stopped).
pub async fn open_store(db: &Path) -> Store {
    Store::open_read_only(db)
        .await
        .unwrap_or_else(|e| panic!("cannot open the store {}: {e}", db.display()))
}

/// Runs a `headroom` command and returns its standard output; fails the test with the command's
/// standard error when it does not succeed.
pub async fn headroom<I, S>(args: I) -> String
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    let args: Vec<_> = args.into_iter().map(|a| a.as_ref().to_owned()).collect();
    let out = Command::new(headroom_bin())
        .args(&args)
        .output()
        .await
        .expect("run headroom");
    assert!(
        out.status.success(),
        "headroom {:?} failed ({}):\n{}",
        args,
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("UTF-8 output")
}

/// One episode of `episodes --json` or `analyze --json` in a line, for messages.
pub fn episode_line(e: &serde_json::Value) -> String {
    format!(
        "{} {}→{} {} settled {}",
        e["start_time"], e["sp_from"], e["sp_to"], e["verdict"], e["settling_time_s"]
    )
}

/// The final episodes the store holds for a loop (`episodes --json`); `Err` while it cannot be
/// read yet.
pub async fn final_episodes(db: &Path, tag: &str) -> Result<Vec<serde_json::Value>, String> {
    let db = db.to_str().ok_or("the store path is not UTF-8")?;
    let out = Command::new(headroom_bin())
        .args(["episodes", "--db", db, "--loop", tag, "--json"])
        .output()
        .await
        .map_err(|e| e.to_string())?;
    if !out.status.success() {
        return Err(String::from_utf8_lossy(&out.stderr).into_owned());
    }
    let all: Vec<serde_json::Value> =
        serde_json::from_slice(&out.stdout).map_err(|e| e.to_string())?;
    Ok(all.into_iter().filter(|e| e["final"] == true).collect())
}

/// Exports a loop from the store, analyses the export offline with `config`, and checks that
/// every live episode in `live` has an offline twin at the same time with the same verdict,
/// setpoint move and settling time.
pub async fn assert_live_matches_offline(
    ws: &Workspace,
    db: &Path,
    config: &Path,
    tag: &str,
    live: &[&serde_json::Value],
) {
    let text = |p: &Path| p.to_str().expect("UTF-8 temp path").to_owned();
    let csv = ws.path().join(format!("{tag}-export.csv"));
    std::fs::write(
        &csv,
        headroom(["export", "--db", &text(db), "--loop", tag]).await,
    )
    .expect("write the export");
    let offline: serde_json::Value = serde_json::from_str(
        &headroom([
            "analyze",
            &text(&csv),
            "--config",
            &text(config),
            "--loop",
            tag,
            "--json",
        ])
        .await,
    )
    .expect("analyze --json is JSON");
    let offline = offline["episodes"].as_array().expect("offline episodes");
    let ms = |v: &serde_json::Value| {
        let s = v.as_str().unwrap_or_else(|| panic!("not a time: {v}"));
        let t: jiff::Timestamp = s.parse().unwrap_or_else(|e| panic!("{s}: {e}"));
        (t.as_nanosecond() as f64 / 1e6).round() as i64
    };
    let offline_list: Vec<String> = offline.iter().map(episode_line).collect();
    for l in live {
        let at = ms(&l["start_time"]);
        let o = offline
            .iter()
            .find(|o| ms(&o["start_time"]) == at)
            .unwrap_or_else(|| {
                panic!(
                    "offline has no episode at {}; offline: {offline_list:#?}",
                    l["start_time"]
                )
            });
        assert_eq!(l["verdict"], o["verdict"], "verdict of {}", episode_line(l));
        assert_eq!((&l["sp_from"], &l["sp_to"]), (&o["sp_from"], &o["sp_to"]));
        match (l["settling_time_s"].as_f64(), o["settling_time_s"].as_f64()) {
            (Some(a), Some(b)) => assert!((a - b).abs() < 1e-6, "settling {a} vs {b}"),
            (a, b) => assert_eq!(a, b, "settling time of {}", episode_line(l)),
        }
    }
}
