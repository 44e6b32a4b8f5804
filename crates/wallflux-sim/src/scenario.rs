//! The demo's simulated kiln, built from a configuration: one
//! finite-difference wall per zone ([`crate::wall`]) with the zone's own
//! layers, shell and air, its hot face following the demo firing scaled to
//! the zone's own set-point, and one thermocouple box per source that scans
//! every probe and writes line-protocol frames.
//!
//! # What comes from the configuration, what is invented
//! - Zones, layers, materials, shell surfaces, probes, channels and sources
//!   are the configuration's.
//! - The firing is [`FiringSchedule::demo_to`] the zone's
//!   `firing_setpoint_c`, or [`DEFAULT_SETPOINT_C`] for a zone without one.
//!   The hot face follows that set-point exactly (the atmosphere is taken as
//!   the face temperature).
//! - **Invented demo data:** the box's terminal temperature (24 °C, warming by
//!   up to 6 °C as the kiln fires), the readings' noise (0.15 °C standard
//!   deviation, Gaussian, fixed seed), and the scan period.
//!
//! # Scan period
//! A box scans every [`MAX_SCAN_S`], or faster when a source's `silence_s`
//! is short: every box sends [`SCANS_PER_SILENCE`] frames within the
//! shortest configured silence limit, so a daemon driven by this simulated
//! time never sees a silent source.
//!
//! Pure: time is the simulator's own (seconds since the start of the
//! firing); writing the frames to a line is the caller's.

use wallflux_core::config::{Settings, Signal};
use wallflux_core::ids::{ChannelId, IdVec, SourceId, ZoneId};
use wallflux_core::physics::thermocouple;
use wallflux_core::protocol::line::{
    encode_frame, EncodeError, Unit, Value, MAX_FRAME_VALUES, MAX_LINE_BYTES,
};

use crate::firing::FiringSchedule;
use crate::rng::SplitMix64;
use crate::wall::{Layer, SimError, WallSim};

/// Set-point of a zone whose configuration has no `firing_setpoint_c`, °C:
/// the top of the demo firing.
pub const DEFAULT_SETPOINT_C: f64 = 1240.0;

/// Longest time between two scans of a box, s.
pub const MAX_SCAN_S: f64 = 10.0;

/// Frames every box sends within the shortest configured `silence_s`.
pub const SCANS_PER_SILENCE: f64 = 4.0;

/// Cells per layer of each simulated wall.
const CELLS_PER_LAYER: usize = 24;

/// Standard deviation of the noise on every reading, °C (demo data).
const NOISE_C: f64 = 0.15;

/// Seed of the readings' noise: every demo run draws the same numbers.
const NOISE_SEED: u64 = 0x2545_F491_4F6C_DD1D;

/// One line-protocol frame, `\n` included.
pub type FrameLine = heapless::String<{ MAX_LINE_BYTES + 2 }>;

/// Errors building the simulated kiln.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScenarioError {
    /// A zone's wall cannot be simulated.
    #[error("cannot simulate zone {zone}: {error}")]
    Wall { zone: String, error: SimError },
}

/// One simulated zone: its wall and its firing.
#[derive(Debug, Clone)]
struct SimZone {
    wall: WallSim,
    firing: FiringSchedule,
    setpoint_c: f64,
}

/// Where a channel's probe sits: the zone and the depth, m.
#[derive(Debug, Clone, Copy)]
struct Place {
    zone: ZoneId,
    depth_m: f64,
}

/// The simulated kiln and its thermocouple boxes.
#[derive(Debug, Clone)]
pub struct Kiln {
    zones: IdVec<ZoneId, SimZone>,
    /// Per channel of the configuration, where its probe sits (`None` for a
    /// channel no zone uses).
    places: IdVec<ChannelId, Option<Place>>,
    scan_s: f64,
    time_s: f64,
    seq: u32,
    cj_c: f64,
    rng: SplitMix64,
}

/// A zone's set-point: its own, or the default.
pub fn zone_setpoint_c(zone: &wallflux_core::config::Zone) -> f64 {
    zone.firing_setpoint_c.unwrap_or(DEFAULT_SETPOINT_C)
}

/// The scan period for these sources: [`MAX_SCAN_S`], or the shortest
/// `silence_s` over [`SCANS_PER_SILENCE`] if that is shorter, s.
pub fn scan_period_s(settings: &Settings) -> f64 {
    settings
        .sources
        .iter()
        .map(|s| s.silence_s / SCANS_PER_SILENCE)
        .filter(|s| s.is_finite() && *s > 0.0)
        .fold(MAX_SCAN_S, f64::min)
}

/// The box's terminal temperature when the firing has gone `progress`
/// (0…1) of the way to its set-point, °C (demo data).
fn terminal_c(progress: f64) -> f64 {
    24.0 + 6.0 * progress.clamp(0.0, 1.0)
}

fn round(v: f64, decimals: i32) -> f64 {
    let p = 10f64.powi(decimals);
    (v * p).round() / p
}

impl Kiln {
    /// The kiln of `settings`, every wall settled at its firing's start.
    pub fn new(settings: &Settings) -> Result<Self, ScenarioError> {
        let zones = settings
            .zones
            .iter()
            .map(|z| Self::zone(settings, z))
            .collect::<Result<_, _>>()?;
        let places = settings.channels.ids().map(|c| {
            settings.zones.iter_ids().find_map(|(zi, z)| {
                z.probes.iter().find(|p| p.channel == c).map(|p| Place {
                    zone: zi,
                    depth_m: p.depth_m,
                })
            })
        });
        Ok(Kiln {
            zones,
            places: places.collect(),
            scan_s: scan_period_s(settings),
            time_s: 0.0,
            seq: 0,
            cj_c: terminal_c(0.0),
            rng: SplitMix64::new(NOISE_SEED),
        })
    }

    /// The simulated wall of zone `z`, settled at its firing's start.
    fn zone(
        settings: &Settings,
        z: &wallflux_core::config::Zone,
    ) -> Result<SimZone, ScenarioError> {
        let layers = z
            .layers
            .iter()
            .map(|l| Layer {
                material: settings.materials[l.material].material.clone(),
                thickness_m: l.thickness_m,
            })
            .collect();
        let setpoint_c = zone_setpoint_c(z);
        let firing = FiringSchedule::demo_to(setpoint_c);
        let start_c = firing.setpoint_c(0.0);
        let mut wall =
            WallSim::new(layers, CELLS_PER_LAYER, start_c, z.surface).map_err(|error| {
                ScenarioError::Wall {
                    zone: z.name.to_string(),
                    error,
                }
            })?;
        wall.settle(start_c);
        Ok(SimZone {
            wall,
            firing,
            setpoint_c,
        })
    }

    /// Seconds between two scans.
    pub fn scan_s(&self) -> f64 {
        self.scan_s
    }

    /// Simulated time since the start of the firing, s.
    pub fn time_s(&self) -> f64 {
        self.time_s
    }

    /// The longest of the zones' firings, s.
    pub fn duration_s(&self) -> f64 {
        self.zones
            .iter()
            .map(|z| z.firing.duration_s())
            .fold(0.0, f64::max)
    }

    /// Zone `zone`'s set-point (the top of its firing), °C; NaN for a zone
    /// the kiln does not have.
    pub fn setpoint_c(&self, zone: ZoneId) -> f64 {
        self.zones.get(zone).map_or(f64::NAN, |z| z.setpoint_c)
    }

    /// Zone `zone`'s firing set-point `t_s` after the start, °C; NaN for a
    /// zone the kiln does not have.
    pub fn firing_c(&self, zone: ZoneId, t_s: f64) -> f64 {
        self.zones
            .get(zone)
            .map_or(f64::NAN, |z| z.firing.setpoint_c(t_s))
    }

    /// Zone `zone`'s simulated temperature at `depth_m`, °C (NaN for a zone
    /// the kiln does not have).
    pub fn temperature_c(&self, zone: ZoneId, depth_m: f64) -> f64 {
        self.zones
            .get(zone)
            .map_or(f64::NAN, |z| z.wall.temperature_at(depth_m))
    }

    /// Advances every wall by one scan period and starts a new scan: the
    /// next frames carry the next sequence number.
    pub fn scan(&mut self) {
        let t = self.time_s + self.scan_s;
        let mut progress = 0.0_f64;
        for z in &mut self.zones {
            let face_c = z.firing.setpoint_c(t);
            z.wall.step(self.scan_s, face_c);
            let start_c = z.firing.start_c;
            let rise = z.setpoint_c - start_c;
            if rise > 0.0 {
                progress = progress.max((face_c - start_c) / rise);
            }
        }
        self.time_s = t;
        self.seq = self.seq.wrapping_add(1);
        self.cj_c = terminal_c(progress) + 0.05 * self.rng.normal();
    }

    /// The frame of source `source` for the current scan, into `out`: every
    /// channel of that source whose probe sits in a zone, as °C or as the
    /// EMF against the box's terminals, with the terminal temperature in
    /// `cj=`. A channel whose EMF is out of its type's range is left out.
    pub fn frame(
        &mut self,
        settings: &Settings,
        source: SourceId,
        out: &mut FrameLine,
    ) -> Result<(), EncodeError> {
        let mut values: heapless::Vec<(u8, Value), MAX_FRAME_VALUES> = heapless::Vec::new();
        for (c, place) in settings.channels.iter().zip(&self.places) {
            let Some(place) = place.filter(|_| c.source == source) else {
                continue;
            };
            let t = self.temperature_c(place.zone, place.depth_m) + NOISE_C * self.rng.normal();
            let v = match c.signal {
                Signal::Celsius => Value::Reading {
                    value: round(t, 1),
                    unit: Unit::Celsius,
                },
                Signal::Millivolts => {
                    let (Ok(e), Ok(e_cj)) = (
                        thermocouple::emf_mv(c.tc_type, t),
                        thermocouple::emf_mv(c.tc_type, self.cj_c),
                    ) else {
                        continue;
                    };
                    Value::Reading {
                        value: round(e - e_cj, 3),
                        unit: Unit::Millivolts,
                    }
                }
            };
            if values.push((c.input, v)).is_err() {
                break;
            }
        }
        encode_frame(self.seq, &values, Some(round(self.cj_c, 1)), out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const CONFIG: &str = r#"
[site]
plant = "p"
kiln = "k"
[mqtt]
host = "127.0.0.1"
[[source]]
name = "box"
kind = "line"
port = "/dev/null"
silence_s = 12
[[channel]]
name = "a-50"
source = "box"
input = 1
type = "K"
[[channel]]
name = "a-shell"
source = "box"
input = 2
type = "K"
[[channel]]
name = "b-50"
source = "box"
input = 3
type = "N"
signal = "millivolts"
[[channel]]
name = "b-shell"
source = "box"
input = 4
type = "N"
signal = "millivolts"
[[material]]
name = "brick"
conductivity_w_mk = 0.3
density_kg_m3 = 800.0
specific_heat_j_kgk = 1000.0
[[zone]]
name = "a"
area_m2 = 1.0
model = "quadratic"
interval_s = 60
orientation = "vertical"
height_m = 1.0
firing_setpoint_c = 900
layers = [{ material = "brick", thickness_mm = 200 }]
probes = [
  { channel = "a-50", depth_mm = 50 },
  { channel = "a-shell", depth_mm = 200 },
]
[[zone]]
name = "b"
area_m2 = 1.0
model = "quadratic"
interval_s = 60
orientation = "vertical"
height_m = 1.0
layers = [{ material = "brick", thickness_mm = 200 }]
probes = [
  { channel = "b-50", depth_mm = 50 },
  { channel = "b-shell", depth_mm = 200 },
]
"#;

    fn settings() -> Settings {
        wallflux_core::config::parse(CONFIG, "test", None).expect("valid test config")
    }

    #[test]
    fn zones_take_their_own_setpoint_or_the_default() {
        let s = settings();
        let kiln = Kiln::new(&s).expect("kiln");
        let (a, b) = (s.zone_named("a").unwrap(), s.zone_named("b").unwrap());
        assert_eq!(kiln.setpoint_c(a), 900.0);
        assert_eq!(kiln.setpoint_c(b), DEFAULT_SETPOINT_C);
        // In the top hold (18 h) each face is at its own set-point.
        assert!((kiln.firing_c(a, 18.0 * 3600.0) - 900.0).abs() < 1e-9);
        assert!((kiln.firing_c(b, 18.0 * 3600.0) - 1240.0).abs() < 1e-9);
        assert!((kiln.duration_s() - 28.0 * 3600.0).abs() < 1e-6);
    }

    #[test]
    fn boxes_scan_four_times_within_the_shortest_silence() {
        // silence_s 12 → a scan every 3 s; a long silence keeps 10 s.
        let mut s = settings();
        assert!((scan_period_s(&s) - 3.0).abs() < 1e-12);
        let source = s.sources.ids().next().expect("a source");
        s.sources[source].silence_s = 600.0;
        assert!((scan_period_s(&s) - MAX_SCAN_S).abs() < 1e-12);
    }

    #[test]
    fn frames_carry_every_probe_of_the_source_and_decode() {
        use wallflux_core::protocol::line::LineParser;
        let s = settings();
        let mut kiln = Kiln::new(&s).expect("kiln");
        for _ in 0..1200 {
            kiln.scan(); // 1 h at 3 s
        }
        let mut line = FrameLine::new();
        let source = s.sources.ids().next().expect("a source");
        kiln.frame(&s, source, &mut line).expect("frame");
        let mut parser = LineParser::new();
        let frame = line
            .bytes()
            .find_map(|b| parser.push(b))
            .expect("a whole line")
            .expect("a valid frame");
        assert_eq!(frame.seq, 1200);
        assert_eq!(frame.values.len(), 4);
        // After 1 h the face of zone a is at 20 + 60 × (880/1220) °C; the
        // probe at 50 mm has warmed above the start but stays below it.
        let face = kiln.firing_c(s.zone_named("a").unwrap(), 3600.0);
        assert!((face - (20.0 + 60.0 * 880.0 / 1220.0)).abs() < 1e-9);
        let Value::Reading { value, .. } = frame.values[0].1 else {
            panic!("a reading: {line}");
        };
        assert!(value > 20.5 && value < face, "{value} vs face {face}");
    }
}
