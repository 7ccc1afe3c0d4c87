//! A real Mosquitto broker per test: its own temp directory, its own loopback port, its own
//! configuration file and log. The daemon tests run against it because the behaviours they pin
//! (persistent sessions, redelivery after a crash, queue limits, refused credentials) are the
//! broker's as much as ours, and an in-process fake would only tell us what we assumed.
//!
//! A missing Mosquitto fails the test with the command that installs it; it never skips.

use super::free_port;
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::time::Duration;
use tokio::process::{Child, Command};

/// What the broker is set up with.
#[derive(Debug, Clone, Default)]
pub struct BrokerOptions {
    /// `None`: anonymous clients allowed. `Some(users)`: only these (user, password) pairs.
    pub users: Option<Vec<(String, String)>>,
    /// Keep sessions and queued messages across a graceful restart (saved on SIGTERM).
    pub persistence: bool,
    /// Messages queued per offline or lagging client; `None` means 0, which Mosquitto reads as
    /// "no limit". (Its own default, 1000, drops QoS 1 messages for a subscriber that lags.)
    pub max_queued_messages: Option<u32>,
    /// A second listener, on its own loopback port, that speaks MQTT over TLS only.
    pub tls: Option<TlsListener>,
}

/// The files of a TLS listener (PEM). Clients are not asked for certificates.
#[derive(Debug, Clone)]
pub struct TlsListener {
    /// The CA Mosquitto is given for the listener.
    pub ca_file: PathBuf,
    /// The server's certificate.
    pub cert_file: PathBuf,
    /// The server's private key.
    pub key_file: PathBuf,
}

/// A running (or stopped, between `stop_graceful` and `restart`) Mosquitto.
pub struct Mosquitto {
    dir: tempfile::TempDir,
    port: u16,
    /// The TLS listener's port, when the options asked for one.
    tls_port: Option<u16>,
    conf: PathBuf,
    log: PathBuf,
    child: Option<Child>,
}

const INSTALL_HINT: &str = "apt-get install -y mosquitto mosquitto-clients";

/// How long a broker may take to accept connections after it is spawned, or to exit after
/// SIGTERM, on a loaded 2-core CI machine.
const BROKER_DEADLINE: Duration = Duration::from_secs(30);

/// The mosquitto executable: on the PATH, or where Debian puts it (/usr/sbin is not on every
/// user's PATH).
pub fn mosquitto_bin() -> PathBuf {
    find_program(
        "mosquitto",
        &["/usr/sbin/mosquitto", "/usr/local/sbin/mosquitto"],
    )
}

fn find_program(name: &str, also: &[&str]) -> PathBuf {
    let on_path = std::env::var_os("PATH")
        .map(|p| {
            std::env::split_paths(&p)
                .map(|d| d.join(name))
                .collect::<Vec<_>>()
        })
        .unwrap_or_default();
    on_path
        .into_iter()
        .chain(also.iter().map(PathBuf::from))
        .find(|p| p.is_file())
        .unwrap_or_else(|| {
            panic!(
                "`{name}` is not installed, and the daemon tests need a real Mosquitto broker. \
                 Install it with: {INSTALL_HINT}"
            )
        })
}

impl Mosquitto {
    /// Writes the configuration, starts the broker and waits until it accepts connections.
    pub async fn start(options: BrokerOptions) -> Mosquitto {
        let mut dir = tempfile::Builder::new()
            .prefix("headroom-broker-")
            .tempdir()
            .expect("temp dir for the broker");
        let password_file = options.users.as_ref().map(|users| {
            let path = dir.path().join("passwords");
            write_password_file(&path, users);
            path
        });
        let mut last_failure = String::new();
        // A port picked as free can be taken before the broker binds it: try a few.
        for _ in 0..5 {
            let port = free_port();
            let tls_port = options.tls.as_ref().map(|_| {
                loop {
                    let p = free_port();
                    if p != port {
                        break p;
                    }
                }
            });
            let conf = dir.path().join("mosquitto.conf");
            let log = dir.path().join("mosquitto.log");
            std::fs::write(
                &conf,
                config_text(
                    (port, tls_port),
                    dir.path(),
                    &log,
                    password_file.as_deref(),
                    &options,
                ),
            )
            .expect("write mosquitto.conf");
            let mut broker = Mosquitto {
                dir,
                port,
                tls_port,
                conf,
                log,
                child: None,
            };
            match broker.spawn().await {
                Ok(()) => return broker,
                Err(e) => {
                    last_failure = e;
                    dir = broker.into_dir();
                }
            }
        }
        panic!("mosquitto did not start: {last_failure}");
    }

    /// Gives the temp directory back for another attempt (a failed broker has exited).
    fn into_dir(self) -> tempfile::TempDir {
        self.dir
    }

    /// Spawns mosquitto on the configured port(s) and waits until every listener accepts.
    async fn spawn(&mut self) -> Result<(), String> {
        let stderr = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(self.dir.path().join("mosquitto.stderr"))
            .expect("open the broker's stderr file");
        let mut child = Command::new(mosquitto_bin())
            .arg("-c")
            .arg(&self.conf)
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(stderr)
            .kill_on_drop(true)
            .spawn()
            .unwrap_or_else(|e| {
                panic!("cannot run mosquitto ({e}); install it with: {INSTALL_HINT}")
            });
        let deadline = tokio::time::Instant::now() + BROKER_DEADLINE;
        loop {
            if let Some(status) = child.try_wait().expect("poll mosquitto") {
                return Err(format!(
                    "mosquitto exited with {status} on port {}; its log:\n{}\n{}",
                    self.port,
                    self.log(),
                    std::fs::read_to_string(self.dir.path().join("mosquitto.stderr"))
                        .unwrap_or_default()
                ));
            }
            let mut accepting = true;
            for port in std::iter::once(self.port).chain(self.tls_port) {
                accepting &= tokio::net::TcpStream::connect(("127.0.0.1", port))
                    .await
                    .is_ok();
            }
            if accepting {
                self.child = Some(child);
                return Ok(());
            }
            if tokio::time::Instant::now() > deadline {
                return Err(format!(
                    "mosquitto did not accept connections on port {} within {BROKER_DEADLINE:?}; \
                     its log:\n{}",
                    self.port,
                    self.log()
                ));
            }
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
    }

    pub fn port(&self) -> u16 {
        self.port
    }

    /// The port of the TLS listener; fails the test when the broker was started without one.
    pub fn tls_port(&self) -> u16 {
        self.tls_port
            .expect("the broker was started without a TLS listener")
    }

    /// The broker's log so far.
    pub fn log(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }

    /// SIGTERM, then waits for the exit. With persistence on, Mosquitto saves its sessions and
    /// queued messages on the way out.
    pub async fn stop_graceful(&mut self) {
        let mut child = self.child.take().expect("the broker is running");
        send_signal(&child, "TERM");
        match tokio::time::timeout(BROKER_DEADLINE, child.wait()).await {
            Ok(status) => {
                let status = status.expect("wait for mosquitto");
                assert!(status.success(), "mosquitto exited with {status}");
            }
            Err(_) => panic!("mosquitto did not stop within {BROKER_DEADLINE:?} of SIGTERM"),
        }
    }

    /// Starts the broker again on the same port and configuration (stopping it first if it
    /// runs). The port was ours a moment ago; if something took it meanwhile, the test fails.
    pub async fn restart(&mut self) {
        if self.child.is_some() {
            self.stop_graceful().await;
        }
        if let Err(e) = self.spawn().await {
            panic!("mosquitto did not restart: {e}");
        }
    }
}

/// Sends a signal by name to a child process that has not been reaped yet (so its pid cannot
/// have been reused). The test crate has no libc binding, so this goes through `kill(1)`.
pub fn send_signal(child: &Child, signal: &str) {
    let pid = child.id().expect("the process is still running");
    let status = std::process::Command::new("kill")
        .arg(format!("-{signal}"))
        .arg(pid.to_string())
        .status()
        .expect("run kill(1)");
    assert!(status.success(), "kill -{signal} {pid} failed");
}

fn config_text(
    (port, tls_port): (u16, Option<u16>),
    dir: &Path,
    log: &Path,
    password_file: Option<&Path>,
    o: &BrokerOptions,
) -> String {
    let mut c = format!("listener {port} 127.0.0.1\n");
    match password_file {
        Some(p) => c += &format!("allow_anonymous false\npassword_file {}\n", p.display()),
        None => c += "allow_anonymous true\n",
    }
    if o.persistence {
        // The trailing slash matters: Mosquitto appends the file name to this text.
        c += &format!(
            "persistence true\npersistence_location {}/\n",
            dir.display()
        );
    } else {
        c += "persistence false\n";
    }
    c += &format!(
        "max_queued_messages {}\n",
        o.max_queued_messages.unwrap_or(0)
    );
    c += "max_inflight_messages 1000\n";
    c += "set_tcp_nodelay true\n";
    c += &format!("log_dest file {}\n", log.display());
    // Not `all`: that logs every PUBLISH, and some tests send a hundred thousand.
    for t in ["error", "warning", "notice", "information"] {
        c += &format!("log_type {t}\n");
    }
    // Run as root (as in a CI container), Mosquitto would switch to the `mosquitto` user, who
    // cannot write to our temp directory. As any other user this line does nothing.
    c += "user root\n";
    // Last, because the lines after a `listener` line up to the next one configure it.
    if let (Some(tls_port), Some(tls)) = (tls_port, &o.tls) {
        c += &format!("listener {tls_port} 127.0.0.1\n");
        c += &format!("cafile {}\n", tls.ca_file.display());
        c += &format!("certfile {}\n", tls.cert_file.display());
        c += &format!("keyfile {}\n", tls.key_file.display());
        c += "require_certificate false\n";
    }
    c
}

/// Writes a Mosquitto password file with `mosquitto_passwd`, which ships with the broker.
fn write_password_file(path: &Path, users: &[(String, String)]) {
    let bin = find_program("mosquitto_passwd", &["/usr/bin/mosquitto_passwd"]);
    for (i, (user, password)) in users.iter().enumerate() {
        let mut cmd = std::process::Command::new(&bin);
        if i == 0 {
            cmd.arg("-c");
        }
        let status = cmd
            .arg("-b")
            .arg(path)
            .arg(user)
            .arg(password)
            .stdout(Stdio::null())
            .status()
            .unwrap_or_else(|e| panic!("cannot run mosquitto_passwd ({e}): {INSTALL_HINT}"));
        assert!(status.success(), "mosquitto_passwd failed for user {user}");
    }
}
