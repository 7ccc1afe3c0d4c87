//! The daemon over `mqtts://`: a throwaway CA and a certificate for 127.0.0.1, made with the
//! `openssl` command in the test's temp directory, secure a Mosquitto TLS listener. With that CA
//! as its `ca_file` the daemon stores what a TLS publisher sends; with a CA that did not sign the
//! broker's certificate it refuses the broker, says why in its log, stores nothing and keeps
//! trying.
//!
//! A missing `openssl` fails the test with the command that installs it; it never skips.

use crate::common::broker::{BrokerOptions, Mosquitto, TlsListener};
use crate::common::clients::{Message, PublishOptions, publish};
use crate::common::daemon::{
    DaemonProcess, LoopRig, LoopTopics, SampleKey, TestConfig, TestLoop, eventually, sample_count,
    stored_keys, tail, unique,
};
use crate::common::plant::{json_sample, recent_past_ms};
use headroom::sample::Signal;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::sync::Arc;
use std::time::Duration;

const TAG: &str = "TIC-401";

const OPENSSL_HINT: &str = "apt-get install -y openssl";

/// The `openssl req` options for a new P-256 key, unencrypted.
const NEW_EC_KEY: &[&str] = &[
    "-newkey",
    "ec",
    "-pkeyopt",
    "ec_paramgen_curve:P-256",
    "-nodes",
];

/// The test's certificates, all PEM, in one temp directory.
struct Pki {
    _dir: tempfile::TempDir,
    /// The CA that signed the server's certificate.
    ca: PathBuf,
    /// Another CA, which signed nothing the broker presents.
    stranger_ca: PathBuf,
    server_cert: PathBuf,
    server_key: PathBuf,
}

impl Pki {
    /// A CA, a server certificate for IP 127.0.0.1 signed by it, and an unrelated second CA.
    fn new() -> Pki {
        let dir = tempfile::Builder::new()
            .prefix("headroom-pki-")
            .tempdir()
            .expect("temp dir for the certificates");
        let d = dir.path();
        make_ca(d, "ca", "headroom test CA");
        make_ca(d, "stranger", "headroom unrelated CA");
        std::fs::write(
            d.join("server.ext"),
            "subjectAltName = IP:127.0.0.1\n\
             basicConstraints = critical, CA:FALSE\n\
             keyUsage = critical, digitalSignature, keyEncipherment\n\
             extendedKeyUsage = serverAuth\n",
        )
        .expect("write the extension file");
        let server_req = ["-keyout", "server.key", "-out", "server.csr"];
        let subject = ["-subj", "/CN=127.0.0.1"];
        openssl(
            d,
            &[&["req", "-new"], NEW_EC_KEY, &server_req, &subject].concat(),
        );
        openssl(
            d,
            &[
                "x509",
                "-req",
                "-in",
                "server.csr",
                "-CA",
                "ca.pem",
                "-CAkey",
                "ca.key",
                "-CAcreateserial",
                "-days",
                "2",
                "-sha256",
                "-extfile",
                "server.ext",
                "-out",
                "server.pem",
            ],
        );
        Pki {
            ca: d.join("ca.pem"),
            stranger_ca: d.join("stranger.pem"),
            server_cert: d.join("server.pem"),
            server_key: d.join("server.key"),
            _dir: dir,
        }
    }

    fn listener(&self) -> TlsListener {
        TlsListener {
            ca_file: self.ca.clone(),
            cert_file: self.server_cert.clone(),
            key_file: self.server_key.clone(),
        }
    }
}

/// A self-signed CA certificate `<name>.pem` with its key `<name>.key`.
fn make_ca(dir: &Path, name: &str, common_name: &str) {
    let key = format!("{name}.key");
    let cert = format!("{name}.pem");
    let subject = format!("/CN={common_name}");
    openssl(
        dir,
        &[
            &["req", "-x509"],
            NEW_EC_KEY,
            &[
                "-keyout",
                &key,
                "-out",
                &cert,
                "-days",
                "2",
                "-sha256",
                "-subj",
                &subject,
                "-addext",
                "basicConstraints = critical, CA:TRUE",
                "-addext",
                "keyUsage = critical, keyCertSign, cRLSign",
            ],
        ]
        .concat(),
    );
}

/// Runs `openssl` in `dir`; fails the test with its output, or with how to install it.
fn openssl(dir: &Path, args: &[&str]) {
    let out = std::process::Command::new("openssl")
        .args(args)
        .current_dir(dir)
        .stdin(Stdio::null())
        .output()
        .unwrap_or_else(|e| {
            panic!(
                "cannot run `openssl` ({e}); the TLS test makes its certificates with it. \
                 Install it with: {OPENSSL_HINT}"
            )
        });
    assert!(
        out.status.success(),
        "openssl {args:?} failed ({}):\n{}",
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
}

/// A TLS client configuration that trusts only the CA in `ca_file`.
fn client_tls(ca_file: &Path) -> Arc<rustls::ClientConfig> {
    use rustls::pki_types::CertificateDer;
    use rustls::pki_types::pem::PemObject;
    // Another test in this binary may have installed it already; either way it is installed.
    let _ = rustls::crypto::ring::default_provider().install_default();
    let mut roots = rustls::RootCertStore::empty();
    for cert in CertificateDer::pem_file_iter(ca_file).expect("read the CA file") {
        roots
            .add(cert.expect("a PEM certificate"))
            .expect("a usable CA certificate");
    }
    Arc::new(
        rustls::ClientConfig::builder()
            .with_root_certificates(roots)
            .with_no_client_auth(),
    )
}

/// Publishes over the broker's TLS listener as a client that trusts `ca_file`; fails the test
/// with `what` and the broker's log unless the broker acknowledged every message.
async fn publish_over_tls(broker: &Mosquitto, ca_file: &Path, msgs: &[Message], what: &str) {
    let published = publish(
        broker.tls_port(),
        msgs,
        PublishOptions {
            tls: Some(client_tls(ca_file)),
            deadline: Duration::from_secs(60),
            ..PublishOptions::new(unique("gateway"))
        },
    )
    .await;
    assert_eq!(
        published.acked_count(),
        msgs.len(),
        "{what}; its log:\n{}",
        broker.log()
    );
}

/// A broker with a TLS listener whose certificate `pki` made.
async fn tls_broker(pki: &Pki) -> Mosquitto {
    Mosquitto::start(BrokerOptions {
        tls: Some(pki.listener()),
        ..BrokerOptions::default()
    })
    .await
}

/// A config for one loop, watched over TLS on the broker's TLS listener with `ca_file`.
fn tls_rig(broker: &Mosquitto, name: &str, ca_file: &Path) -> LoopRig {
    let mut cfg = TestConfig::new(broker.tls_port(), name);
    cfg.tls = true;
    cfg.ca_file = Some(ca_file.to_path_buf());
    LoopRig::with(cfg, TAG, |l| TestLoop {
        expected_period_s: 1.0,
        ..l
    })
}

/// `n` seconds of one sample a second per signal, starting `t0_ms`, and their store keys.
fn samples(topics: &LoopTopics, t0_ms: i64, n: i64) -> (Vec<Message>, BTreeSet<SampleKey>) {
    let mut msgs = Vec::new();
    let mut keys = BTreeSet::new();
    for k in 0..n {
        let t = t0_ms + k * 1000;
        for (signal, value) in [
            (Signal::Sp, 50.0),
            (Signal::Pv, 49.0 + 0.01 * k as f64),
            (Signal::Op, 30.0),
        ] {
            msgs.push((topics.of(signal).to_string(), json_sample(value, t)));
            keys.insert((TAG.to_string(), signal, t));
        }
    }
    (msgs, keys)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn over_tls_with_the_brokers_ca_every_sample_is_stored() {
    let pki = Pki::new();
    let broker = tls_broker(&pki).await;
    let rig = tls_rig(&broker, "tls", &pki.ca);
    let db = &rig.db;

    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    let (msgs, keys) = samples(&rig.topics, recent_past_ms(600), 40);
    publish_over_tls(
        &broker,
        &pki.ca,
        &msgs,
        "the broker acknowledged every message sent over TLS",
    )
    .await;

    eventually(
        "every sample sent over TLS in the store",
        Duration::from_secs(60),
        async || {
            let stored = stored_keys(db, &[TAG]).await?;
            if stored == keys {
                Ok(())
            } else {
                Err(format!("{} of {} samples stored", stored.len(), keys.len()))
            }
        },
    )
    .await;
    let log = daemon.log();
    assert!(
        log.contains("connected to the MQTT broker"),
        "the daemon never said it connected; its log:\n{}",
        tail(&log, 30)
    );
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_ca_that_did_not_sign_the_brokers_certificate_is_refused_with_a_clear_error() {
    let pki = Pki::new();
    let broker = tls_broker(&pki).await;
    let rig = tls_rig(&broker, "tls-wrong-ca", &pki.stranger_ca);
    let (topics, cfg, db) = (&rig.topics, &rig.cfg, &rig.db);
    let tls_port = broker.tls_port();
    // Connections the broker logs on its TLS listener from here on (the harness probed it once
    // while starting the broker).
    let attempts_before = tls_connections(&broker.log(), tls_port);

    let mut daemon = DaemonProcess::start(&rig.config);
    // The reason is in the log: the broker's certificate is not from a CA the daemon trusts.
    eventually(
        "the daemon to log why it refuses the broker",
        Duration::from_secs(30),
        async || {
            let log = daemon.log();
            if let Some(line) = log.lines().find(|l| {
                let l = l.to_ascii_lowercase();
                (l.contains("warn") || l.contains("error"))
                    && l.contains("tls")
                    && l.contains("certificate")
            }) {
                return Ok(line.to_string());
            }
            if !daemon.is_running() {
                panic!("the daemon exited; its log:\n{log}");
            }
            Err(tail(&log, 10))
        },
    )
    .await;

    // A publisher that does trust the broker's CA sends data while the daemon is refused...
    let (msgs, _) = samples(topics, recent_past_ms(600), 10);
    publish_over_tls(
        &broker,
        &pki.ca,
        &msgs,
        "the broker's TLS listener works for a client with the right CA",
    )
    .await;

    // ...and the daemon keeps trying: the broker sees it come back again and again.
    eventually(
        "the daemon to try the broker again and again",
        // Generous: under a loaded CI machine each refused TLS attempt can take several
        // seconds on top of the back-off (at most 5 s).
        Duration::from_secs(150),
        async || {
            let n = tls_connections(&broker.log(), tls_port) - attempts_before;
            if !daemon.is_running() {
                panic!("the daemon exited; its log:\n{}", daemon.log());
            }
            if n >= 4 {
                Ok(())
            } else {
                Err(format!("{n} connection attempts so far"))
            }
        },
    )
    .await;
    assert!(daemon.is_running(), "the daemon gave up and exited");
    assert!(
        !broker.log().contains(&format!(" as {} ", cfg.client_id)),
        "the broker accepted the daemon as a client although it trusts another CA; its log:\n{}",
        broker.log()
    );
    assert!(
        !daemon.log().contains("subscribed"),
        "the daemon subscribed through a broker it should not trust; its log:\n{}",
        daemon.log()
    );
    assert_eq!(
        sample_count(db).await,
        Ok(0),
        "the daemon stored samples from a broker it should not trust"
    );
    let status = daemon.sigterm().await;
    assert!(
        status.success(),
        "the daemon exited with {status} on SIGTERM while refused; its log:\n{}",
        tail(&daemon.log(), 30)
    );
}

/// How many connections the broker's log shows on `port`.
fn tls_connections(log: &str, port: u16) -> usize {
    let marker = format!(" on port {port}.");
    log.lines()
        .filter(|l| l.contains("New connection from") && l.contains(&marker))
        .count()
}
