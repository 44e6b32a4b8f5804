//! Shared helpers of the integration tests: the real binary, temp files.
#![allow(dead_code)]

pub mod feeder;
pub mod mqtt;
pub mod proxy;

use std::path::PathBuf;
use std::process::{Child, Command, Output, Stdio};

pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_wallflux"))
}

pub fn run(args: &[&str]) -> Output {
    bin().args(args).output().expect("run wallflux")
}

/// A fresh directory under the target dir for one test.
pub fn temp_dir(name: &str) -> PathBuf {
    let d =
        PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

pub fn write(dir: &std::path::Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// A one-zone configuration: a single homogeneous layer of `thickness_mm`
/// with constant conductivity `k`, probes at `depths_mm` on inputs 1.., type K.
pub fn one_zone_config(
    port: &str,
    mqtt_port: u16,
    k: f64,
    thickness_mm: f64,
    depths_mm: &[f64],
    interval_s: f64,
) -> String {
    let state_dir =
        std::env::temp_dir().join(format!("wallflux-test-{mqtt_port}-{}", std::process::id()));
    let state_dir = state_dir.display();
    let mut s = format!(
        r#"
state_dir = "{state_dir}"

[site]
plant = "test-plant"
kiln = "k1"

[mqtt]
host = "127.0.0.1"
port = {mqtt_port}
client_id = "wallflux-test-{mqtt_port}"
topic_root = "wf"

[log]
summary_every = 1

[[source]]
name = "box"
kind = "line"
port = "{port}"
baud = 115200
silence_s = 5

[[material]]
name = "slab"
conductivity_w_mk = {k}
density_kg_m3 = 2000.0
specific_heat_j_kgk = 1000.0
"#
    );
    for (i, _) in depths_mm.iter().enumerate() {
        s += &format!(
            "\n[[channel]]\nname = \"p{i}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\ntolerance = \"iec-class-1\"\n",
            i + 1
        );
    }
    s += &format!(
        "\n[[zone]]\nname = \"wall\"\narea_m2 = 10.0\nmodel = \"quadratic\"\ninterval_s = {interval_s}\nrate_window_s = {}\nlayers = [{{ material = \"slab\", thickness_mm = {thickness_mm} }}]\nprobes = [\n",
        interval_s * 10.0
    );
    for (i, d) in depths_mm.iter().enumerate() {
        s += &format!("  {{ channel = \"p{i}\", depth_mm = {d} }},\n");
    }
    s += "]\n";
    s
}

/// The channels of zone `zone`'s probes, in the zone's probe order.
pub fn probe_channels(s: &wallflux::config::Settings, zone: &str) -> Vec<wallflux::ids::ChannelId> {
    let z = s
        .zone_named(zone)
        .unwrap_or_else(|| panic!("no zone {zone}"));
    s.zones[z].probes.iter().map(|p| p.channel).collect()
}

/// The channel named `name` (panics naming it when there is none).
pub fn channel(s: &wallflux::config::Settings, name: &str) -> wallflux::ids::ChannelId {
    s.channel_named(name)
        .unwrap_or_else(|| panic!("no channel {name}"))
}

/// Runs `wallflux analyze` on a config file and samples text; returns the
/// JSON lines it printed (exit 0 asserted, stderr shown on failure).
pub fn analyze_csv(dir: &std::path::Path, config: &std::path::Path, csv: &str) -> String {
    let samples = write(dir, "samples.csv", csv);
    let o = run(&[
        "analyze",
        "--config",
        config.to_str().unwrap(),
        "--samples",
        samples.to_str().unwrap(),
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// `wallflux run --config config`, its log (stderr) written to `log`.
pub fn start_daemon(config: &std::path::Path, log: &std::path::Path) -> Daemon {
    Daemon(
        bin()
            .args(["run", "--config", config.to_str().unwrap()])
            .stdout(Stdio::null())
            .stderr(std::fs::File::create(log).unwrap())
            .spawn()
            .unwrap(),
    )
}

/// A daemon started by a test; killed when dropped, so a failing test
/// leaves none behind.
pub struct Daemon(pub Child);

impl std::ops::Deref for Daemon {
    type Target = Child;
    fn deref(&self) -> &Child {
        &self.0
    }
}

impl std::ops::DerefMut for Daemon {
    fn deref_mut(&mut self) -> &mut Child {
        &mut self.0
    }
}

impl Drop for Daemon {
    fn drop(&mut self) {
        if matches!(self.0.try_wait(), Ok(None)) {
            let _ = self.0.kill();
            let _ = self.0.wait();
        }
    }
}

/// SIGTERM to a daemon started by `start_daemon`: it must exit 0.
pub fn stop_daemon(mut daemon: Daemon) {
    // SAFETY: kill(2) on our own child's pid.
    unsafe {
        libc::kill(daemon.id() as libc::pid_t, libc::SIGTERM);
    }
    assert_eq!(daemon.wait().unwrap().code(), Some(0));
}

/// The energy totals the daemon keeps in its state directory: in the local
/// database (table `state`, name `energy`), else in `energy.json`.
pub fn saved_energy(state_dir: &std::path::Path) -> serde_json::Value {
    let db = state_dir.join("store.db");
    if db.exists() {
        let conn =
            rusqlite::Connection::open_with_flags(&db, rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
                .unwrap();
        let json: Option<Vec<u8>> = conn
            .query_row("SELECT json FROM state WHERE name = 'energy'", [], |r| {
                r.get(0)
            })
            .ok();
        if let Some(j) = json {
            return serde_json::from_slice(&j).unwrap();
        }
    }
    serde_json::from_slice(&std::fs::read(state_dir.join("energy.json")).unwrap()).unwrap()
}
