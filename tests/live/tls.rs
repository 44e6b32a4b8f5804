//! `[mqtt.tls]` against a real mosquitto TLS listener, with certificates
//! made by the `openssl` command for each run: a plant CA, the broker's
//! certificate for `localhost` only (no IP address in it), a client
//! certificate, and a second CA that signed nothing of the broker's.
//! (mosquitto only: the embedded broker has no TLS listener.)

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::mpsc;
use std::time::{Duration, Instant};

use rumqttc::{Client, Event, MqttOptions, Packet, QoS, TlsConfiguration, Transport};

use crate::common::feeder::{Feeder, Values};
use crate::common::mqtt::{free_port, wait_all, wait_for, Broker, Msg};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const USER: &str = "wallflux-kiln-3";
/// The daemon's broker password: it must appear in no output.
const PASSWORD: &str = "tls-d-secret-7Qx";
const SCADA: (&str, &str) = ("scada-1", "tls-s-secret-4Kp");

fn openssl(dir: &Path, args: &[&str]) {
    let out = Command::new("openssl")
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the openssl command is installed");
    assert!(
        out.status.success(),
        "openssl {}: {}",
        args.join(" "),
        String::from_utf8_lossy(&out.stderr)
    );
}

/// A self-signed CA `name` (`name.pem`, `name.key`) in `dir`.
fn make_ca(dir: &Path, name: &str, subject: &str) {
    openssl(
        dir,
        &[
            "req",
            "-x509",
            "-newkey",
            "ec",
            "-pkeyopt",
            "ec_paramgen_curve:P-256",
            "-nodes",
            "-keyout",
            &format!("{name}.key"),
            "-out",
            &format!("{name}.pem"),
            "-days",
            "2",
            "-subj",
            subject,
            "-addext",
            "basicConstraints=critical,CA:TRUE",
            "-addext",
            "keyUsage=critical,keyCertSign,cRLSign",
        ],
    );
}

/// A certificate `name.crt` (key `name.key`) signed by CA `ca`, with the
/// extensions `ext` (one per line).
fn make_cert(dir: &Path, ca: &str, name: &str, subject: &str, ext: &str) {
    std::fs::write(dir.join(format!("{name}.ext")), ext).unwrap();
    openssl(
        dir,
        &[
            "req",
            "-newkey",
            "ec",
            "-pkeyopt",
            "ec_paramgen_curve:P-256",
            "-nodes",
            "-keyout",
            &format!("{name}.key"),
            "-out",
            &format!("{name}.csr"),
            "-subj",
            subject,
        ],
    );
    openssl(
        dir,
        &[
            "x509",
            "-req",
            "-in",
            &format!("{name}.csr"),
            "-CA",
            &format!("{ca}.pem"),
            "-CAkey",
            &format!("{ca}.key"),
            "-CAcreateserial",
            "-out",
            &format!("{name}.crt"),
            "-days",
            "2",
            "-extfile",
            &format!("{name}.ext"),
        ],
    );
}

/// mosquitto with two TLS listeners on 127.0.0.1 (`port`: password only;
/// `cert_port`: a client certificate from the plant CA as well) and the
/// accounts of the daemon and of a SCADA client.
struct Rig {
    dir: PathBuf,
    port: u16,
    cert_port: u16,
    _broker: Broker,
}

impl Rig {
    fn new(name: &str) -> Rig {
        let dir = temp_dir(name);
        make_ca(&dir, "plant-ca", "/O=wallflux test/CN=plant CA");
        make_ca(&dir, "other-ca", "/O=wallflux test/CN=another CA");
        make_cert(
            &dir,
            "plant-ca",
            "broker",
            "/CN=localhost",
            "subjectAltName=DNS:localhost\nextendedKeyUsage=serverAuth\nbasicConstraints=CA:FALSE\n",
        );
        make_cert(
            &dir,
            "plant-ca",
            "kiln-3",
            &format!("/CN={USER}"),
            "extendedKeyUsage=clientAuth\nbasicConstraints=CA:FALSE\n",
        );
        // mosquitto drops to its own user before it reads its key: a test
        // key, readable by all.
        set_mode(&dir.join("broker.key"), 0o644);
        let passwd = dir.join("passwd");
        for (i, (user, pass)) in [(USER, PASSWORD), SCADA].iter().enumerate() {
            let mut c = Command::new("mosquitto_passwd");
            if i == 0 {
                c.arg("-c");
            }
            let ok = c
                .arg("-b")
                .arg(&passwd)
                .arg(user)
                .arg(pass)
                .status()
                .unwrap();
            assert!(ok.success());
        }
        let (port, cert_port) = (free_port(), free_port());
        let d = dir.display();
        let conf = format!(
            "per_listener_settings false\nallow_anonymous false\npassword_file {d}/passwd\n\
             listener {port} 127.0.0.1\ncafile {d}/plant-ca.pem\ncertfile {d}/broker.crt\nkeyfile {d}/broker.key\n\
             listener {cert_port} 127.0.0.1\ncafile {d}/plant-ca.pem\ncertfile {d}/broker.crt\nkeyfile {d}/broker.key\nrequire_certificate true\n"
        );
        let broker = Broker::mosquitto_with(port, &dir, &conf);
        wait_listening(cert_port);
        std::fs::write(dir.join("mqtt-password"), format!("{PASSWORD}\n")).unwrap();
        set_mode(&dir.join("mqtt-password"), 0o600);
        Rig {
            dir,
            port,
            cert_port,
            _broker: broker,
        }
    }

    fn path(&self, name: &str) -> String {
        self.dir.join(name).display().to_string()
    }

    /// A daemon's configuration: kiln `kiln` (its own topics, client id and
    /// state directory) on the broker's `port`, `mqtt` added to its
    /// `[mqtt]`, the daemon's account with its password file.
    fn config(&self, pty: &Pty, kiln: &str, host: &str, port: u16, mqtt: &str) -> PathBuf {
        let text = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0)
            .replace("kiln = \"k1\"", &format!("kiln = \"{kiln}\""))
            .replace("host = \"127.0.0.1\"", &format!("host = \"{host}\""))
            .replacen(
                "state_dir = \"",
                &format!(
                    "state_dir = \"{}\"\n# ",
                    self.path(&format!("state-{kiln}"))
                ),
                1,
            )
            .replace(
                &format!("client_id = \"wallflux-test-{port}\""),
                &format!("client_id = \"wallflux-{kiln}\""),
            )
            .replace(
                "topic_root = \"wf\"",
                &format!(
                    "topic_root = \"wf\"\nusername = \"{USER}\"\npassword_file = \"{}\"\n{mqtt}",
                    self.path("mqtt-password")
                ),
            );
        write(&self.dir, &format!("{kiln}.toml"), &text)
    }

    /// A TLS client of the plant CA, with `account`, that subscribes to
    /// `filter` and forwards what it receives.
    fn subscribe(&self, filter: &str, account: Option<(&str, &str)>) -> mpsc::Receiver<Msg> {
        let (tx, rx) = mpsc::channel();
        let (client, mut conn) = Client::new(self.client_options("tls-sub", account), 16);
        let filter = filter.to_string();
        std::thread::spawn(move || {
            for ev in conn.iter() {
                match ev {
                    Ok(Event::Incoming(Packet::ConnAck(_))) => {
                        let _ = client.try_subscribe(filter.clone(), QoS::AtLeastOnce);
                    }
                    Ok(Event::Incoming(Packet::Publish(p))) => {
                        let json =
                            serde_json::from_slice(&p.payload).unwrap_or(serde_json::Value::Null);
                        let m = Msg {
                            topic: p.topic.clone(),
                            retained: p.retain,
                            json,
                        };
                        if tx.send(m).is_err() {
                            return;
                        }
                    }
                    Ok(_) => {}
                    Err(_) => std::thread::sleep(Duration::from_millis(200)),
                }
            }
        });
        rx
    }

    /// Whether a TLS client with `account` gets a CONNACK that accepts it.
    fn connects(&self, account: Option<(&str, &str)>) -> Result<(), String> {
        let (client, mut conn) = Client::new(self.client_options("tls-try", account), 4);
        let mut result = Err("the connection ended".to_string());
        for ev in conn.iter() {
            match ev {
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    result = Ok(());
                    break;
                }
                Ok(_) => {}
                Err(e) => {
                    result = Err(e.to_string());
                    break;
                }
            }
        }
        let _ = client.disconnect();
        result
    }

    /// rumqttc's own TLS set-up (not the daemon's) with the plant CA, to
    /// `localhost` on the password-only listener.
    fn client_options(&self, id: &str, account: Option<(&str, &str)>) -> MqttOptions {
        wallflux::publish::tls::install_provider();
        static N: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
        let n = N.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let mut opts = MqttOptions::new(
            format!("{id}-{}-{}-{n}", self.port, std::process::id()),
            "localhost",
            self.port,
        );
        opts.set_keep_alive(Duration::from_secs(5));
        opts.set_transport(Transport::tls_with_config(TlsConfiguration::Simple {
            ca: std::fs::read(self.dir.join("plant-ca.pem")).unwrap(),
            alpn: None,
            client_auth: None,
        }));
        if let Some((u, p)) = account {
            opts.set_credentials(u, p);
        }
        opts
    }
}

fn set_mode(path: &Path, mode: u32) {
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(path, std::fs::Permissions::from_mode(mode)).unwrap();
}

fn wait_listening(port: u16) {
    let deadline = Instant::now() + Duration::from_secs(20);
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        assert!(Instant::now() < deadline, "nothing listens on {port}");
        std::thread::sleep(Duration::from_millis(50));
    }
}

fn feeder(pty: Pty) -> Feeder {
    let values: Values = std::sync::Arc::new(|i, _| Some(900.0 - 820.0 * DEPTHS_MM[i] / 250.0));
    Feeder::start(pty, DEPTHS_MM.len(), values)
}

/// Waits (bounded) until the log at `path` holds `needle`; returns the log.
fn log_saying(path: &Path, needle: &str) -> String {
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let text = std::fs::read_to_string(path).unwrap_or_default();
        if text.contains(needle) {
            return text;
        }
        assert!(
            Instant::now() < deadline,
            "the log does not say {needle:?}:\n{text}"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
}

fn skip() -> bool {
    if Broker::kind() != "mosquitto" {
        eprintln!("skipped: needs mosquitto, with WALLFLUX_TEST_BROKER=mosquitto (CI runs it)");
        return true;
    }
    false
}

/// Over TLS with its account, the daemon publishes (a TLS subscriber sees
/// `online` and a zone state), reaching the broker by its address while its
/// certificate names only `localhost` (`server_name`); a TLS client without
/// an account is refused; a client certificate from the plant CA is taken
/// where the broker requires one. Its password appears in no output.
#[test]
fn over_tls_the_daemon_publishes_with_its_account() {
    if skip() {
        return;
    }
    let rig = Rig::new("tls-ok");
    assert!(
        rig.connects(None).is_err(),
        "a TLS client without an account was let in"
    );
    let rx = rig.subscribe("wf/test-plant/#", Some(SCADA));

    let pty = Pty::open().unwrap();
    let cfg = rig.config(
        &pty,
        "kiln-a",
        "127.0.0.1",
        rig.port,
        &format!(
            "tls = {{ ca_file = \"{}\", server_name = \"localhost\" }}",
            rig.path("plant-ca.pem")
        ),
    );
    let _feed = feeder(pty);
    let log = rig.dir.join("kiln-a.log");
    let daemon = start_daemon(&cfg, &log);
    wait_all(
        &rx,
        Duration::from_secs(30),
        "online and a zone state of kiln-a over TLS",
        &[
            &|m: &Msg| m.topic == "wf/test-plant/kiln-a/status" && m.json["state"] == "online",
            &|m: &Msg| m.topic == "wf/test-plant/kiln-a/zone/wall/state",
        ],
    );

    // The listener that wants a client certificate: the daemon with its
    // own, given as a `[mqtt.tls]` table.
    let pty = Pty::open().unwrap();
    let cfg_b = rig.config(
        &pty,
        "kiln-b",
        "localhost",
        rig.cert_port,
        &format!(
            "[mqtt.tls]\nca_file = \"{}\"\nclient_cert_file = \"{}\"\nclient_key_file = \"{}\"",
            rig.path("plant-ca.pem"),
            rig.path("kiln-3.crt"),
            rig.path("kiln-3.key")
        ),
    );
    let _feed_b = feeder(pty);
    let log_b = rig.dir.join("kiln-b.log");
    let daemon_b = start_daemon(&cfg_b, &log_b);
    wait_for(
        &rx,
        Duration::from_secs(30),
        "kiln-b online with its client certificate",
        |m| m.topic == "wf/test-plant/kiln-b/status" && m.json["state"] == "online",
    );

    let check = run(&["check", "--config", cfg.to_str().unwrap()]);
    let check_b = run(&["check", "--config", cfg_b.to_str().unwrap()]);
    stop_daemon(daemon);
    stop_daemon(daemon_b);
    assert_eq!(check.status.code(), Some(0), "{check:?}");
    for (what, text) in [
        ("the log of kiln-a", std::fs::read_to_string(&log).unwrap()),
        (
            "the log of kiln-b",
            std::fs::read_to_string(&log_b).unwrap(),
        ),
        (
            "check",
            format!(
                "{}{}",
                String::from_utf8_lossy(&check.stdout),
                String::from_utf8_lossy(&check.stderr)
            ),
        ),
        (
            "check",
            format!(
                "{}{}",
                String::from_utf8_lossy(&check_b.stdout),
                String::from_utf8_lossy(&check_b.stderr)
            ),
        ),
    ] {
        assert!(!text.contains(PASSWORD), "the password in {what}:\n{text}");
    }
}

/// A daemon that trusts the wrong CA, or checks the wrong name, does not
/// connect, and its log says why in words, once; a client certificate key
/// that others can read is warned about at start and by `check`; the key
/// of another certificate is refused at start naming both keys. The
/// password appears in no output.
#[test]
fn a_tls_failure_is_said_in_words() {
    if skip() {
        return;
    }
    let rig = Rig::new("tls-bad");
    let rx = rig.subscribe("wf/test-plant/#", Some(SCADA));

    // The wrong CA.
    let pty = Pty::open().unwrap();
    let cfg = rig.config(
        &pty,
        "kiln-c",
        "127.0.0.1",
        rig.port,
        &format!(
            "tls = {{ ca_file = \"{}\", server_name = \"localhost\" }}",
            rig.path("other-ca.pem")
        ),
    );
    let log = rig.dir.join("kiln-c.log");
    let daemon = start_daemon(&cfg, &log);
    // The right CA, but the name checked is the host's address, which the
    // broker's certificate does not carry.
    let pty_d = Pty::open().unwrap();
    let cfg_d = rig.config(
        &pty_d,
        "kiln-d",
        "127.0.0.1",
        rig.port,
        &format!("tls = {{ ca_file = \"{}\" }}", rig.path("plant-ca.pem")),
    );
    let log_d = rig.dir.join("kiln-d.log");
    let daemon_d = start_daemon(&cfg_d, &log_d);

    // No client certificate where the broker requires one.
    let pty_g = Pty::open().unwrap();
    let cfg_g = rig.config(
        &pty_g,
        "kiln-g",
        "localhost",
        rig.cert_port,
        &format!("tls = {{ ca_file = \"{}\" }}", rig.path("plant-ca.pem")),
    );
    let log_g = rig.dir.join("kiln-g.log");
    let daemon_g = start_daemon(&cfg_g, &log_g);
    let text_g = log_saying(
        &log_g,
        "TLS: the broker wants a client certificate (mqtt.tls.client_cert_file and client_key_file)",
    );
    stop_daemon(daemon_g);

    let said = "TLS: the broker's certificate is not signed by mqtt.tls.ca_file";
    log_saying(&log, said);
    let text_d = log_saying(&log_d, "TLS: the broker's certificate is not for 127.0.0.1");
    // Neither got through: a fresh TLS client with an account does, and the
    // subscriber has seen no status of either kiln.
    rig.connects(Some(SCADA)).unwrap();
    while let Ok(m) = rx.try_recv() {
        assert!(
            !m.topic.starts_with("wf/test-plant/kiln-c")
                && !m.topic.starts_with("wf/test-plant/kiln-d"),
            "{m:?}"
        );
    }
    stop_daemon(daemon);
    stop_daemon(daemon_d);
    let text = std::fs::read_to_string(&log).unwrap();
    assert_eq!(
        text.matches(said).count(),
        1,
        "said once per outage:\n{text}"
    );

    // A client key others can read: warned at start and by `check`. A key
    // that is not the certificate's: refused at start, naming both keys.
    let key = rig.dir.join("kiln-3.key");
    set_mode(&key, 0o644);
    let pty_e = Pty::open().unwrap();
    let tls = |key: &str| {
        format!(
            "tls = {{ ca_file = \"{}\", client_cert_file = \"{}\", client_key_file = \"{key}\", server_name = \"localhost\" }}",
            rig.path("plant-ca.pem"),
            rig.path("kiln-3.crt")
        )
    };
    let cfg_e = rig.config(
        &pty_e,
        "kiln-e",
        "127.0.0.1",
        rig.cert_port,
        &tls(&rig.path("kiln-3.key")),
    );
    let check = run(&["check", "--config", cfg_e.to_str().unwrap()]);
    let check_out = format!(
        "{}{}",
        String::from_utf8_lossy(&check.stdout),
        String::from_utf8_lossy(&check.stderr)
    );
    assert_eq!(check.status.code(), Some(0), "{check_out}");
    assert!(
        check_out.contains("mqtt.tls.client_key_file")
            && check_out.contains("can be read by others"),
        "{check_out}"
    );
    let strict = run(&["check", "--strict", "--config", cfg_e.to_str().unwrap()]);
    assert_eq!(strict.status.code(), Some(2), "{strict:?}");
    let strict_err = String::from_utf8_lossy(&strict.stderr);
    assert!(
        strict_err.contains("refused with --strict")
            && strict_err.contains("can be read by others"),
        "{strict_err}"
    );
    let log_e = rig.dir.join("kiln-e.log");
    let daemon_e = start_daemon(&cfg_e, &log_e);
    let text_e = log_saying(&log_e, "can be read by others");
    wait_for(&rx, Duration::from_secs(30), "kiln-e online", |m| {
        m.topic == "wf/test-plant/kiln-e/status" && m.json["state"] == "online"
    });
    stop_daemon(daemon_e);

    let cfg_f = rig.config(
        &pty_e,
        "kiln-f",
        "127.0.0.1",
        rig.cert_port,
        &tls(&rig.path("broker.key")),
    );
    let log_f = rig.dir.join("kiln-f.log");
    let mut daemon_f = start_daemon(&cfg_f, &log_f);
    let deadline = Instant::now() + Duration::from_secs(20);
    let code = loop {
        if let Some(status) = daemon_f.try_wait().unwrap() {
            break status.code();
        }
        assert!(
            Instant::now() < deadline,
            "a daemon with the wrong key kept running"
        );
        std::thread::sleep(Duration::from_millis(50));
    };
    let text_f = std::fs::read_to_string(&log_f).unwrap();
    assert_eq!(code, Some(1), "{text_f}");
    assert!(
        text_f.contains("is not the key of mqtt.tls.client_cert_file"),
        "{text_f}"
    );

    for (what, text) in [
        ("the log of kiln-c", text),
        ("the log of kiln-d", text_d),
        ("the log of kiln-g", text_g),
        ("the log of kiln-e", text_e),
        ("the output of kiln-f", text_f),
        ("check", check_out),
    ] {
        assert!(!text.contains(PASSWORD), "the password in {what}:\n{text}");
        assert!(
            !text.contains("BEGIN"),
            "a PEM file's content in {what}:\n{text}"
        );
    }
}
