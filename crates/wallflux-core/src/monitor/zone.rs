//! The zone cycle: every `interval_s`, the latest valid reading of each
//! probe → profile fit → faces, fluxes, loss, source, rates → a `ZoneReport`.
//! Fixed capacity throughout: no heap allocation per cycle.

use heapless::{HistoryBuf, Vec as HVec};
use serde::Serialize;

use super::channel::{ChannelState, Health, Reading};
use super::lining::Baseline;
use super::model::transient::MAX_LIMITS;
use super::model::{self, note, ModelInput, Note, ZoneModel};
use super::trend::windowed_rate_per_h;
use super::wall::Wall;
use crate::config::{Model, NamedMaterial};
use crate::config::{Name, Settings, Zone, MAX_FORECASTS, MAX_PROBES};
use crate::ids::{ChannelId, IdVec, ZoneId};
use crate::physics::layered::MAX_LAYERS;
use crate::physics::profile::ProbeSample;
use crate::physics::surface::{surface_loss, SurfaceLoss};
use crate::physics::transient::ShellBoundary;
use crate::physics::uncertainty::{
    Budget, OUT_FLUX_HOT_FACE, OUT_FLUX_SHELL, OUT_HOT_FACE, OUT_SHELL,
};
use crate::time::Timestamp;

pub use super::model::steady::FAST_RATE_C_PER_H;
pub use super::model::transient::{ForecastReport, LimitReport};

/// Schema tag of the zone-state payload.
pub const ZONE_SCHEMA: &str = "wallflux.zone/1";
/// A reading older than this many intervals is stale and not used.
pub const STALE_INTERVALS: f64 = 3.0;
/// Points kept per probe for the measured-rate regression.
pub const RATE_POINTS: usize = 64;

crate::word_enum! {
    /// How far a zone's numbers can be trusted, in order of severity (each
    /// later status withholds more; see docs/mqtt-topics.md for what each
    /// nulls and what an operator should do). `Ord` follows this order, so the
    /// worse of two is their `max`.
    #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
    pub enum ZoneStatus {
        /// Every probe valid, the full model order fitted, the model's checks
        /// passed.
        Ok = "ok",
        /// Numbers published from fewer probes than configured (or a reduced
        /// model order); still vouched for by the checks.
        Degraded = "degraded",
        /// The fit has no redundancy (its probes cannot test it) and the
        /// surface cross-check disagrees beyond the combined uncertainty: the
        /// extrapolated numbers (hot face, fluxes, loss) are withheld.
        Unconfirmed = "unconfirmed",
        /// A steady model contradicted by its probes while the wall heats or
        /// cools: the model's numbers are withheld until the wall settles.
        NotSteady = "not_steady",
        /// The probes contradict the model while the wall is not changing fast
        /// (wrong depths, materials or a bad probe), or the transient filter
        /// diverged and was reset: the model's numbers are withheld.
        Contradicted = "contradicted",
        /// A published number failed a physical sanity check (a face outside
        /// what its neighbouring measurements allow, a heat loss of the wrong
        /// sign, a flux not finite or beyond any kiln's): withheld.
        Implausible = "implausible",
        /// Too few valid probes: no model numbers at all.
        InsufficientData = "insufficient_data",
    }
}

impl ZoneStatus {
    /// Does this status withhold the model's numbers (published as null)?
    pub fn withholds(self) -> bool {
        matches!(
            self,
            ZoneStatus::Unconfirmed
                | ZoneStatus::NotSteady
                | ZoneStatus::Contradicted
                | ZoneStatus::Implausible
        )
    }
}

/// Standard uncertainties (1 σ) of the headline numbers: the probes'
/// readings, their depths and the layers' conductivities (and heat
/// capacities, transient) propagated through the zone's model
/// (`physics::uncertainty`), with the share of each source in `budget`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Uncertainty {
    pub hot_face_c: f64,
    pub shell_c: f64,
    pub flux_hot_face_w_m2: f64,
    pub flux_shell_w_m2: f64,
    pub heat_loss_w: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interface_c: Option<HVec<f64, MAX_LAYERS>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thermal_resistance_m2k_w: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_remaining_mm: Option<f64>,
    /// Which input dominates each number's uncertainty.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub budget: Option<UncertaintyBudget>,
    /// The readings' part alone of (hot face, shell, shell flux): the
    /// tolerance of the physical sanity checks, which a wrong conductivity
    /// or depth should trip rather than widen (not published).
    #[serde(skip)]
    pub readings_only: [f64; 3],
}

/// The share of each source in the variance of a number, % (they sum to
/// 100). `heat_capacity_pct` only from the transient model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Shares {
    pub thermocouple_pct: f64,
    pub depth_pct: f64,
    pub conductivity_pct: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub heat_capacity_pct: Option<f64>,
}

/// The uncertainty budget of the headline numbers (`heat_loss_w` shares
/// that of `flux_shell_w_m2`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct UncertaintyBudget {
    pub hot_face_c: Option<Shares>,
    pub shell_c: Option<Shares>,
    pub flux_hot_face_w_m2: Option<Shares>,
    pub flux_shell_w_m2: Option<Shares>,
}

impl UncertaintyBudget {
    /// The shares of a budget's outputs; `heat_capacity` says whether the
    /// model has that source (the transient model).
    pub fn of(b: &Budget, heat_capacity: bool) -> Self {
        let shares = |i: usize| {
            b.shares_pct(i).map(|[t, d, k, c]| Shares {
                thermocouple_pct: t,
                depth_pct: d,
                conductivity_pct: k,
                heat_capacity_pct: heat_capacity.then_some(c),
            })
        };
        UncertaintyBudget {
            hot_face_c: shares(OUT_HOT_FACE),
            shell_c: shares(OUT_SHELL),
            flux_hot_face_w_m2: shares(OUT_FLUX_HOT_FACE),
            flux_shell_w_m2: shares(OUT_FLUX_SHELL),
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProbeReport {
    pub channel: Name,
    pub depth_mm: f64,
    pub measured_c: Option<f64>,
    pub fitted_c: Option<f64>,
    pub rate_measured_c_per_h: Option<f64>,
    pub rate_model_c_per_h: Option<f64>,
    pub status: Health,
}

/// The zone state of docs/mqtt-topics.md (MQTT payload and `analyze` line).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ZoneReport {
    pub schema: &'static str,
    pub time: Timestamp,
    pub zone: Name,
    pub model: &'static str,
    pub status: ZoneStatus,
    pub hot_face_c: Option<f64>,
    pub shell_c: Option<f64>,
    pub flux_hot_face_w_m2: Option<f64>,
    pub flux_shell_w_m2: Option<f64>,
    pub heat_loss_w: Option<f64>,
    pub source_w_m3: Option<f64>,
    pub fit_rms_c: Option<f64>,
    pub fit_degree: Option<u8>,
    /// Shell loss from the shell temperature alone (convection + radiation,
    /// or the configured combined coefficient), W/m².
    pub flux_surface_w_m2: Option<f64>,
    pub h_convection_w_m2k: Option<f64>,
    pub h_radiation_w_m2k: Option<f64>,
    /// (Fourier flux at the shell − surface estimate) / surface estimate, %.
    /// Large values point at a failed shell thermocouple, wet insulation or
    /// a wall that is not at the state the model assumes.
    pub balance_mismatch_pct: Option<f64>,
    /// Rate of heat storage in the wall from the probes' measured rates,
    /// ∫ ρ c_p ∂T/∂t dx (trapezoid over the probes, each end value held to
    /// its face), W/m². Positive: the wall is heating.
    pub stored_w_m2: Option<f64>,
    /// Interface temperatures hot to cold (layered model), °C.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interface_c: Option<HVec<f64, MAX_LAYERS>>,
    /// The cold side of each interface, as `interface_c` (which is the hot
    /// side): null where the contact is perfect, °C.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interface_cold_c: Option<HVec<Option<f64>, MAX_LAYERS>>,
    /// Thermal resistance hot face → shell (layered model), m²K/W.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thermal_resistance_m2k_w: Option<f64>,
    /// `consistent`, `contradicted` or `untested`: do the probes agree with
    /// the model within their uncertainties (χ² against its 3σ quantile)?
    pub model_check: Option<&'static str>,
    /// Why, in words, when the check says contradicted.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub model_note: Option<Note>,
    /// Transient model: the estimated hot-face rate, °C/h.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hot_face_rate_c_per_h: Option<f64>,
    /// Transient model: windowed mean normalised innovation squared per
    /// reading (about 1 when the model and the readings agree).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub filter_nis: Option<f64>,
    /// Transient model: the profile run ahead under the hot-face trend.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub forecast: Option<HVec<ForecastReport, MAX_FORECASTS>>,
    /// Transient model: hours until each limit is reached, within the
    /// longest forecast horizon.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub time_to_limit_h: Option<HVec<LimitReport, MAX_LIMITS>>,
    /// Layered model with a hot-face reading: the measured thermal
    /// resistance (T_hot − T_shell)/q against its baseline learned over
    /// `baseline_days` at comparable hot-face temperature, % (negative: less
    /// insulation than at commissioning: wear, cracks, wet insulation).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub resistance_change_pct: Option<f64>,
    /// Layered model with a hot-face reading: the hot-side layer's
    /// remaining thickness that best explains the probes, mm.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_remaining_mm: Option<f64>,
    pub probes_used: u8,
    pub uncertainty: Option<Uncertainty>,
    pub probes: HVec<ProbeReport, MAX_PROBES>,
    /// Layered model with a hot-face reading: the lining baseline's state
    /// and dates (set by the monitor after the cycle).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lining_baseline: Option<super::lining::BaselineReport>,
    /// A zone with a `fallback`: the model that produced these numbers
    /// (the zone's own, or `transient` while its steady model is
    /// `not_steady`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub model_used: Option<&'static str>,
    /// The zone's `hot_face_channel` reading, if fresh: published as
    /// `hot_face_c` when the model's own hot face is withheld (a measured
    /// value stays), so that the ramp and service-limit alarms keep working
    /// through a heat-up.
    #[serde(skip)]
    pub hot_face_measured_c: Option<f64>,
}

/// Per-probe state kept between cycles.
#[derive(Debug, Clone)]
struct ProbeTrack {
    /// `(time_s since start, °C)` in time order, decimated.
    history: HistoryBuf<(f64, f64), RATE_POINTS>,
}

/// One zone's engine state.
#[derive(Debug)]
pub struct ZoneEngine {
    id: ZoneId,
    pub next_due: Timestamp,
    tracks: HVec<ProbeTrack, MAX_PROBES>,
    /// Time origin of the rate histories (keeps the regression well scaled).
    origin: Timestamp,
    pub cycles: u64,
    /// Zone-level faults of each probe from the last cycle (stuck, outlier).
    pub diagnosis: HVec<Option<(Health, &'static str)>, MAX_PROBES>,
    /// The zone's `model`.
    model: Box<dyn ZoneModel>,
    /// The zone's `fallback`: run every cycle beside a steady model, so that
    /// it has followed the wall when the steady model cannot.
    fallback: Option<Box<dyn ZoneModel>>,
    /// Learned thermal-resistance baseline (layered model).
    pub baseline: Baseline,
}

/// Each probe's reading this cycle, in configured probe order.
struct Freshened {
    /// The fresh reading (None: stale or missing).
    fresh: HVec<Option<Reading>, MAX_PROBES>,
    /// Measured rate over the rate window, °C/h.
    rates: HVec<Option<f64>, MAX_PROBES>,
    /// Span of the readings over the rate window, °C (stuck test).
    spans: HVec<Option<f64>, MAX_PROBES>,
}

/// The samples that survive the diagnostics.
struct Valid {
    samples: HVec<ProbeSample, MAX_PROBES>,
    /// The probe of each sample.
    probe: HVec<usize, MAX_PROBES>,
    /// Each sample's depth standard uncertainty, m.
    depth_sigma_m: HVec<f64, MAX_PROBES>,
}

impl ZoneEngine {
    pub fn new(id: ZoneId, zone: &Zone, materials: &[NamedMaterial], start: Timestamp) -> Self {
        // Every per-probe vector of the cycle is collected from the zone's
        // probes, whose capacity it shares: nothing can be dropped.
        let tracks = zone
            .probes
            .iter()
            .map(|_| ProbeTrack {
                history: HistoryBuf::new(),
            })
            .collect();
        ZoneEngine {
            id,
            next_due: start.plus_s(zone.interval_s),
            tracks,
            origin: start,
            cycles: 0,
            diagnosis: HVec::new(),
            model: model::build(zone.model, zone, materials),
            fallback: zone
                .fallback
                .filter(|&f| f != zone.model)
                .map(|f| model::build(f, zone, materials)),
            baseline: Baseline::default(),
        }
    }

    /// Runs one cycle at `now` over the channels' current states:
    /// freshen (readings and their rates) → diagnose (stuck, outlier) →
    /// fit (the model, and the fallback's view) → report ([`vet`] over
    /// every published number, the fallback's view where the steady model
    /// cannot follow the wall).
    pub fn cycle(
        &mut self,
        settings: &Settings,
        channels: &IdVec<ChannelId, ChannelState>,
        now: Timestamp,
    ) -> ZoneReport {
        let zone = &settings.zones[self.id];
        self.cycles += 1;
        let max_age_s = STALE_INTERVALS * zone.interval_s;
        let readings = self.freshen(zone, channels, now, max_age_s);
        let valid = self.diagnose(settings, zone, &readings);
        let measured = self.measured(settings, zone, channels, &readings, &valid, now, max_age_s);
        let input = ModelInput {
            settings,
            zone_id: self.id,
            zone,
            channels,
            samples: &valid.samples,
            depth_sigma_m: &valid.depth_sigma_m,
            max_age_s,
            now,
        };
        let baseline = &mut self.baseline;
        let view = self
            .fallback
            .as_mut()
            .map(|m| fit(m.as_mut(), &input, baseline, measured.clone()));
        let report = fit(self.model.as_mut(), &input, baseline, measured);
        reported(zone, channels, report, view)
    }

    /// The fresh reading of each probe, its history and measured rate.
    fn freshen(
        &mut self,
        zone: &Zone,
        channels: &IdVec<ChannelId, ChannelState>,
        now: Timestamp,
        max_age_s: f64,
    ) -> Freshened {
        let spacing_s = zone.rate_window_s / (RATE_POINTS as f64 - 1.0);
        // A rate spans at least two intervals, so a single step does not
        // read as one.
        let min_span_s = 2.0 * zone.interval_s.min(zone.rate_window_s / 2.0);
        let now_s = now.since(self.origin);
        let origin = self.origin;
        let each: HVec<(Option<Reading>, Option<f64>, Option<f64>), MAX_PROBES> = zone
            .probes
            .iter()
            .zip(self.tracks.iter_mut())
            .map(|(probe, track)| {
                let r = channels[probe.channel].fresh(now, max_age_s);
                if let Some(r) = r {
                    let t = r.time.since(origin);
                    let newer = track
                        .history
                        .recent()
                        .is_none_or(|&(t0, _)| t - t0 >= spacing_s);
                    if newer {
                        track.history.write((t, r.celsius));
                    }
                }
                let h = &track.history;
                let rate =
                    r.and_then(|_| windowed_rate_per_h(h, now_s, zone.rate_window_s, min_span_s));
                let span = r.and_then(|_| history_span_c(h, now_s, zone.rate_window_s));
                (r, rate, span)
            })
            .collect();
        Freshened {
            fresh: each.iter().map(|e| e.0).collect(),
            rates: each.iter().map(|e| e.1).collect(),
            spans: each.iter().map(|e| e.2).collect(),
        }
    }

    /// Diagnostics the zone can make and a channel alone cannot (stuck,
    /// outlier), into `self.diagnosis`; the samples that remain.
    fn diagnose(&mut self, settings: &Settings, zone: &Zone, readings: &Freshened) -> Valid {
        let depths: HVec<f64, MAX_PROBES> = zone.probes.iter().map(|p| p.depth_m).collect();
        let mut diagnosis: HVec<Option<(Health, &'static str)>, MAX_PROBES> =
            (0..readings.fresh.len())
                .map(|i| {
                    stuck(&readings.spans, &depths, i).then_some((
                        Health::Stuck,
                        "the same value repeated exactly while a neighbouring probe changes",
                    ))
                })
                .collect();
        let kept: HVec<(usize, ProbeSample), MAX_PROBES> = zone
            .probes
            .iter()
            .zip(&readings.fresh)
            .enumerate()
            .filter_map(|(i, (probe, r))| match (r, diagnosis[i]) {
                (Some(r), None) => Some((
                    i,
                    ProbeSample {
                        depth_m: probe.depth_m,
                        temp_c: r.celsius,
                        sigma_c: r.sigma_c,
                    },
                )),
                _ => None,
            })
            .collect();
        let mut valid = Valid {
            samples: kept.iter().map(|k| k.1).collect(),
            probe: kept.iter().map(|k| k.0).collect(),
            depth_sigma_m: HVec::new(),
        };
        // Outliers only while the wall is near steady state: in a
        // transient the model's own misfit (steep curvature near the hot
        // face) would be blamed on a healthy probe. So every probe must be
        // changing slowly, the suspect too (a probe that jumped is judged
        // once its rate window has passed the jump). The test needs a
        // steady wall; a transient zone has none and skips it.
        let sample_rates: HVec<Option<f64>, MAX_PROBES> =
            valid.probe.iter().map(|&i| readings.rates[i]).collect();
        if let Some(k) = Wall::new(zone, settings)
            .as_ref()
            .and_then(|w| outlier(w, &valid.samples, &sample_rates))
        {
            diagnosis[valid.probe[k]] = Some((
                Health::Outlier,
                "inconsistent with the zone's other probes (leave-one-out residual)",
            ));
            valid.samples.remove(k);
            valid.probe.remove(k);
        }
        valid.depth_sigma_m = valid
            .probe
            .iter()
            .map(|&i| zone.probes[i].depth_sigma_m)
            .collect();
        self.diagnosis = diagnosis;
        valid
    }

    /// The report of what was measured, before any model: each probe's
    /// reading, rate and status; status `insufficient_data`.
    #[allow(clippy::too_many_arguments)]
    fn measured(
        &self,
        settings: &Settings,
        zone: &Zone,
        channels: &IdVec<ChannelId, ChannelState>,
        readings: &Freshened,
        valid: &Valid,
        now: Timestamp,
        max_age_s: f64,
    ) -> ZoneReport {
        let probes = zone
            .probes
            .iter()
            .enumerate()
            .map(|(i, probe)| {
                let (health, _) = channels[probe.channel].health_at(now, max_age_s);
                let status = match (readings.fresh[i], self.diagnosis[i]) {
                    (_, Some((h, _))) => h,
                    (Some(_), None) => Health::Ok,
                    (None, None) => health,
                };
                ProbeReport {
                    channel: settings.channels[probe.channel].name.clone(),
                    depth_mm: probe.depth_m * 1000.0,
                    measured_c: readings.fresh[i].map(|r| r.celsius),
                    fitted_c: None,
                    rate_measured_c_per_h: readings.rates[i],
                    rate_model_c_per_h: None,
                    status,
                }
            })
            .collect();
        ZoneReport {
            schema: ZONE_SCHEMA,
            time: now,
            zone: zone.name.clone(),
            model: zone.model.name(),
            status: ZoneStatus::InsufficientData,
            hot_face_c: None,
            shell_c: None,
            flux_hot_face_w_m2: None,
            flux_shell_w_m2: None,
            heat_loss_w: None,
            source_w_m3: None,
            fit_rms_c: None,
            fit_degree: None,
            flux_surface_w_m2: None,
            h_convection_w_m2k: None,
            h_radiation_w_m2k: None,
            balance_mismatch_pct: None,
            stored_w_m2: None,
            interface_c: None,
            interface_cold_c: None,
            thermal_resistance_m2k_w: None,
            model_check: None,
            model_note: None,
            hot_face_rate_c_per_h: None,
            filter_nis: None,
            forecast: None,
            time_to_limit_h: None,
            resistance_change_pct: None,
            lining_remaining_mm: None,
            probes_used: valid.samples.len() as u8,
            uncertainty: None,
            probes,
            lining_baseline: None,
            model_used: None,
            hot_face_measured_c: None,
        }
    }
}

/// `model`'s numbers on top of the measured report; a model that gives
/// none says why in `model_note`, and the zone has `insufficient_data`.
fn fit(
    model: &mut dyn ZoneModel,
    input: &ModelInput<'_>,
    baseline: &mut Baseline,
    mut report: ZoneReport,
) -> ZoneReport {
    report.model = model.model().name();
    if let Err(why) = model.estimate(input, baseline, &mut report) {
        report.status = ZoneStatus::InsufficientData;
        report.model_note = Some(model::failure(model.model(), &why));
    }
    report
}

/// The published report: [`vet`] over the model's numbers, and the
/// fallback's `view` in place of a steady model that cannot follow a wall
/// heating or cooling (when the view itself is vouched for).
fn reported(
    zone: &Zone,
    channels: &IdVec<ChannelId, ChannelState>,
    mut report: ZoneReport,
    view: Option<ZoneReport>,
) -> ZoneReport {
    // Each probe's standard uncertainty, for the checks' tolerances.
    let sigma_c: HVec<Option<f64>, MAX_PROBES> = zone
        .probes
        .iter()
        .map(|p| {
            channels
                .get(p.channel)
                .and_then(|c| c.latest)
                .map(|r| r.sigma_c)
        })
        .collect();
    vet(&mut report, zone, &sigma_c);
    if let Some(mut v) = view {
        vet(&mut v, zone, &sigma_c);
        report.model_used = Some(zone.model.name());
        if report.status == ZoneStatus::NotSteady && v.status < ZoneStatus::Unconfirmed {
            let used = v.model;
            v.model = report.model;
            v.model_used = Some(used);
            v.model_note = Some(note(NOTE_FALLBACK));
            report = v;
        }
    }
    report
}

/// Heat lost by the shell surface at `shell_c`: the configured combined
/// coefficient (all of it reported as convection), or the natural/forced
/// convection and radiation correlations of `physics::surface`.
pub fn shell_surface(zone: &Zone, shell_c: f64) -> SurfaceLoss {
    match zone.surface_h_w_m2k {
        Some(h) => SurfaceLoss {
            h_convection_w_m2k: h,
            h_radiation_w_m2k: 0.0,
            flux_w_m2: h * (shell_c - zone.surface.ambient_c),
        },
        None => surface_loss(shell_c, &zone.surface),
    }
}

/// The transient model's shell boundary: the same law as [`shell_surface`],
/// a measured `surface_h_w_m2k` to the ambient air when one is given (all
/// of it convection, as in the steady models), the correlations otherwise.
pub fn transient_shell(zone: &Zone) -> ShellBoundary {
    match zone.surface_h_w_m2k {
        Some(h_w_m2k) => ShellBoundary::Convection {
            h_w_m2k,
            ambient_c: zone.surface.ambient_c,
        },
        None => ShellBoundary::Surface(zone.surface),
    }
}

/// A probe is stuck when it repeated exactly the same value over the
/// window (a live thermocouple always shows some noise or drift; a frozen
/// input module or a dead converter repeats its last value bit for bit)…
pub const STUCK_SPAN_C: f64 = 1e-9;
/// …while a probe next to it in depth moved by more than this, °C. (A
/// shell probe may legitimately sit still for hours while the lining
/// heats, so "the others move" alone is not enough.)
pub const STUCK_OTHERS_C: f64 = 5.0;
/// Readings in the window before a span is judged.
pub const MIN_SPAN_POINTS: usize = 5;
/// An outlier's leave-one-out studentised residual exceeds this (a
/// threshold of ours: five standard uncertainties).
pub const OUTLIER_T: f64 = 5.0;

/// Range (max − min) of a probe's history over the window, when the
/// history covers at least half of it.
fn history_span_c(
    history: &HistoryBuf<(f64, f64), RATE_POINTS>,
    now_s: f64,
    window_s: f64,
) -> Option<f64> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    let mut first = None;
    let mut n = 0;
    for &(t, v) in history.oldest_ordered() {
        if now_s - t <= window_s {
            first.get_or_insert(t);
            lo = lo.min(v);
            hi = hi.max(v);
            n += 1;
        }
    }
    // Enough distinct readings to call it a span (a reading that was not
    // renewed is not a repeated one).
    first
        .filter(|&t0| n >= MIN_SPAN_POINTS && now_s - t0 >= window_s / 2.0)
        .map(|_| hi - lo)
}

/// Probe `i` stuck: exactly flat while its neighbours in depth moved.
fn stuck(spans: &[Option<f64>], depths: &[f64], i: usize) -> bool {
    let Some(own) = spans[i] else { return false };
    if own > STUCK_SPAN_C {
        return false;
    }
    // The nearest shallower and deeper probes.
    let d = depths[i];
    let nearest = |deeper: bool| {
        (0..spans.len())
            .filter(|&j| j != i && if deeper { depths[j] > d } else { depths[j] < d })
            .min_by(|&a, &b| (depths[a] - d).abs().total_cmp(&(depths[b] - d).abs()))
    };
    // Every neighbour it has moved (one jumping neighbour is its own fault).
    let neighbours: HVec<usize, 2> = [nearest(false), nearest(true)]
        .into_iter()
        .flatten()
        .collect();
    !neighbours.is_empty()
        && neighbours
            .iter()
            .all(|&j| spans[j].is_some_and(|s| s > STUCK_OTHERS_C))
}

/// The one sample inconsistent with the others, if any. Each sample is
/// predicted by the fit of the others and its studentised residual
/// r / √(σᵢ² + var ŷ) computed; the worst is an outlier when it exceeds
/// `OUTLIER_T` and the fit without it is itself consistent (every
/// standardised residual below 3). That second test needs a redundant fit
/// without it, so five samples or more: a profile the model cannot follow
/// (a fast transient) spreads over all probes and is not blamed on one.
fn outlier(
    wall: &Wall<'_>,
    samples: &HVec<ProbeSample, MAX_PROBES>,
    rates: &[Option<f64>],
) -> Option<usize> {
    // The fit without the suspect must itself be redundant: more samples
    // than the model's parameters (quadratic 3, layered 2).
    let params = match wall {
        Wall::Quadratic(_) => 3,
        Wall::Layered(_) => 2,
    };
    if samples.len() < params + 2 {
        return None;
    }
    let without = |i: usize| {
        let mut rest = samples.clone();
        rest.remove(i);
        rest
    };
    // Studentised leave-one-out residuals, then the largest first: the
    // first whose removal leaves a consistent fit is the outlier (the
    // largest alone can be a well-behaved probe that the bad one drags).
    let mut t: HVec<(usize, f64), MAX_PROBES> = samples
        .iter()
        .enumerate()
        .filter_map(|(i, &s)| {
            let (y, sd) = wall
                .solve(&without(i))
                .ok()
                .and_then(|f| wall.fitted(&f, s.depth_m))?;
            let var = s.sigma_c * s.sigma_c + sd * sd;
            Some((i, ((s.temp_c - y) / var.sqrt()).abs()))
        })
        .collect();
    t.sort_unstable_by(|a, b| b.1.total_cmp(&a.1));
    t.iter()
        .take_while(|(_, ti)| *ti > OUTLIER_T)
        .filter(|_| {
            rates
                .iter()
                .all(|r| r.is_some_and(|r| r.abs() <= FAST_RATE_C_PER_H))
        })
        .find_map(|&(i, _)| {
            let rest = without(i);
            let fit = wall.solve(&rest).ok()?;
            rest.iter()
                .all(|s| {
                    wall.fitted(&fit, s.depth_m)
                        .is_some_and(|(y, _)| ((s.temp_c - y) / s.sigma_c).abs() < 3.0)
                })
                .then_some(i)
        })
}

/// Notes of the statuses, in the words a plant engineer reads.
pub const NOTE_FALLBACK: &str = "the wall is heating or cooling faster than the steady model can follow: these numbers come from the transient model (fallback)";
pub const NOTE_NOT_STEADY: &str = "the wall is heating or cooling faster than a steady model can follow (its probes disagree with it, or change at rates it cannot have): hot face, fluxes and heat loss are withheld until the wall settles; measured temperatures are still published";
pub const NOTE_CONTRADICTED: &str = "the probes disagree with the model although the wall is not changing fast: check the probe depths, the materials and each probe; the model's numbers are withheld";
pub const NOTE_UNCONFIRMED: &str = "the fit passes exactly through its probes, so they cannot check it, and its shell flux disagrees with the loss expected from the shell temperature beyond their combined uncertainty: hot face, fluxes and heat loss are withheld (a further probe makes the fit checkable)";

/// Coverage factor of the sanity checks: a published face temperature or
/// flux is called implausible only beyond this many combined standard
/// uncertainties (a threshold of ours, chosen so that a correct wall is
/// never flagged: 4σ is exceeded by chance about once in 16 000 checks)…
pub const VET_COVERAGE: f64 = 4.0;
/// …plus this much, K (the readings' resolution and rounding).
pub const VET_FLOOR_K: f64 = 1.0;
/// How far below the air a shell may be before its estimate is implausible,
/// K (a shell radiating to a cold roof or sky can sit a few kelvin below
/// the air; a threshold of ours, generous).
pub const SHELL_BELOW_AIR_K: f64 = 10.0;
/// How far above `firing_setpoint_c` a hot face may be before its estimate
/// is implausible, K (kilns overshoot their set-point by tens of kelvin;
/// a threshold of ours).
pub const HOT_FACE_OVER_SETPOINT_K: f64 = 100.0;
/// Largest plausible flux through a kiln wall, W/m²: black-body emission at
/// 2000 °C is σ_SB·(2273 K)⁴ = 1.51 MW/m² (Stefan–Boltzmann), and no hot
/// face receives more than a fraction of it.
pub const FLUX_LIMIT_W_M2: f64 = 1.0e6;
/// A probe falling slower than this, °C/h, counts as heating or holding for
/// the face checks (while the wall cools, its hot face cools first and may
/// rightly read below the shallowest probe).
pub const HOLDING_RATE_C_PER_H: f64 = 1.0;
/// A probe this close to the shell, mm, measures the shell.
pub const SHELL_PROBE_MM: f64 = 2.0;
/// Relative standard uncertainty of the surface-loss estimate from the
/// shell temperature. Natural-convection correlations (Churchill–Chu and
/// the like) are commonly quoted as good to ±20–30 %, and the emissivity of
/// a painted or oxidised shell is rarely known better: common practice,
/// taken here as 25 % (1σ), also for a configured `surface_h_w_m2k`.
pub const SURFACE_LOSS_REL_SIGMA: f64 = 0.25;
/// Coverage factor of the surface cross-check of an uncheckable fit.
pub const CROSS_CHECK_COVERAGE: f64 = 3.0;

/// Any probe changing faster than [`FAST_RATE_C_PER_H`]?
pub(crate) fn changing_fast(probes: &[ProbeReport]) -> bool {
    probes
        .iter()
        .filter_map(|p| p.rate_measured_c_per_h)
        .any(|r| r.abs() > FAST_RATE_C_PER_H)
}

/// The post-pass over every model's report: the statuses the model's own
/// code cannot see (an uncheckable fit that the surface contradicts), the
/// numbers each status withholds
/// (published as null, see [`withhold`]), then the physical sanity checks
/// of [`implausibility`] on what is left, which demote to `implausible`.
/// The status only ever gets worse here. Allocation-free.
/// `probe_sigma_c[i]` is probe i's standard uncertainty (None: unknown).
pub fn vet(report: &mut ZoneReport, zone: &Zone, probe_sigma_c: &[Option<f64>]) {
    if report.status == ZoneStatus::InsufficientData {
        return;
    }
    if report.model_check == Some("untested")
        && !report.status.withholds()
        && surface_disagrees(report)
    {
        report.status = ZoneStatus::Unconfirmed;
        report.model_note = Some(note(NOTE_UNCONFIRMED));
    }
    withhold(report, zone);
    if let Some(note) = implausibility(report, zone, probe_sigma_c) {
        report.status = report.status.max(ZoneStatus::Implausible);
        report.model_note = Some(model::note(note));
        withhold(report, zone);
    }
}

/// Surface cross-check of a fit its probes cannot test: the Fourier flux at
/// the shell q_F against the surface loss q_s from the shell temperature,
/// disagreeing when |q_F − q_s| > k·u_c with
/// u_c² = σ_F² + (0.25·q_s)² + ((h_c + h_r)·σ_shell)²
/// (GUM combination of the fit's σ, the correlation's uncertainty
/// [`SURFACE_LOSS_REL_SIGMA`] and the shell temperature's; k = 3).
fn surface_disagrees(report: &ZoneReport) -> bool {
    let (Some(q_f), Some(q_s)) = (report.flux_shell_w_m2, report.flux_surface_w_m2) else {
        return false;
    };
    let h = report.h_convection_w_m2k.unwrap_or(0.0) + report.h_radiation_w_m2k.unwrap_or(0.0);
    let (s_f, s_shell) = report
        .uncertainty
        .as_ref()
        .map_or((0.0, 0.0), |u| (u.flux_shell_w_m2, u.shell_c));
    let u_c = (s_f * s_f + (SURFACE_LOSS_REL_SIGMA * q_s).powi(2) + (h * s_shell).powi(2)).sqrt();
    (q_f - q_s).abs() > CROSS_CHECK_COVERAGE * u_c
}

/// The valid probe at the shell, if any (`(°C, index)`).
fn shell_probe(report: &ZoneReport, zone: &Zone) -> Option<(f64, usize)> {
    let shell_mm = zone.thickness_m() * 1000.0;
    report
        .probes
        .iter()
        .enumerate()
        .filter(|(_, p)| p.status == Health::Ok && p.depth_mm >= shell_mm - SHELL_PROBE_MM)
        .find_map(|(i, p)| p.measured_c.map(|t| (t, i)))
}

/// Publishes as null what a withholding status cannot vouch for:
///
/// | number | `unconfirmed` | `not_steady`, `contradicted`, `implausible` |
/// |---|---|---|
/// | `hot_face_c` | the `hot_face_channel` reading, else null | the same |
/// | both fluxes, `heat_loss_w`, `source_w_m3`, `interface_c`, `interface_cold_c`, `thermal_resistance_m2k_w`, `resistance_change_pct`, `lining_remaining_mm`, `hot_face_rate_c_per_h`, `forecast`, `time_to_limit_h`, `uncertainty`, each probe's `rate_model_c_per_h` | null | null |
/// | `shell_c` and the surface loss from it | the shell thermocouple's reading, else null | the same |
/// | `balance_mismatch_pct` | kept (the evidence) | null |
/// | `stored_w_m2` | kept from measured rates, null from the transient estimate | the same |
///
/// Kept always: the measured values and rates, `fit_rms_c`, `model_check`,
/// `filter_nis`, each probe's `fitted_c` (the residuals are the evidence).
fn withhold(report: &mut ZoneReport, zone: &Zone) {
    if !report.status.withholds() {
        return;
    }
    report.hot_face_c = report.hot_face_measured_c;
    report.flux_hot_face_w_m2 = None;
    report.flux_shell_w_m2 = None;
    report.heat_loss_w = None;
    report.source_w_m3 = None;
    report.interface_c = None;
    report.interface_cold_c = None;
    report.thermal_resistance_m2k_w = None;
    report.resistance_change_pct = None;
    report.lining_remaining_mm = None;
    report.hot_face_rate_c_per_h = None;
    report.forecast = None;
    report.time_to_limit_h = None;
    report.uncertainty = None;
    if report.model == Model::Transient.name() {
        report.stored_w_m2 = None;
    }
    for p in report.probes.iter_mut() {
        p.rate_model_c_per_h = None;
    }
    if report.status != ZoneStatus::Unconfirmed {
        report.balance_mismatch_pct = None;
    }
    // The shell as its thermocouple reads it (a measured value stays, and
    // the shell-touch alarm keeps working through a heat-up).
    match shell_probe(report, zone) {
        Some((t, _)) => {
            let s = shell_surface(zone, t);
            report.shell_c = Some(t);
            report.flux_surface_w_m2 = Some(s.flux_w_m2);
            report.h_convection_w_m2k = Some(s.h_convection_w_m2k);
            report.h_radiation_w_m2k = Some(s.h_radiation_w_m2k);
        }
        None => {
            report.shell_c = None;
            report.flux_surface_w_m2 = None;
            report.h_convection_w_m2k = None;
            report.h_radiation_w_m2k = None;
        }
    }
}

/// `k·√(σa² + σb²) + floor`: how far two estimates may differ by chance.
fn vet_tolerance(sigma_a: f64, sigma_b: f64) -> f64 {
    VET_COVERAGE * sigma_a.hypot(sigma_b) + VET_FLOOR_K
}

/// The physical sanity checks on the numbers a report publishes; the note
/// of the first that fails. Tolerances come from the stated σ
/// ([`vet_tolerance`]). The checks, each a consequence of the heat
/// equation with heat supplied at the hot face:
///
/// - every number finite, every flux within [`FLUX_LIMIT_W_M2`];
/// - the shell not below the air by more than [`SHELL_BELOW_AIR_K`], equal
///   to a shell thermocouple, and while heat flows outward through the
///   deepest inner probe (it is above the air and not cooling) not hotter
///   than that probe;
/// - while the wall heats or holds (the shallowest probe not falling faster
///   than [`HOLDING_RATE_C_PER_H`]) and heat flows inward from the hot face
///   (the shallowest probe hotter than the next), the hot face not below
///   the shallowest probe: ∂T/∂t ≥ 0 makes T(x) convex, so the face is the
///   wall's hottest point; when cooling, the face cools first and may
///   rightly read below it, so no check then;
/// - the hot face not above `firing_setpoint_c` by more than
///   [`HOT_FACE_OVER_SETPOINT_K`];
/// - the shell flux and the heat loss with the sign of T_shell − T_air
///   (the massless shell surface's balance: q(L) = h·(T_shell − T_air)).
fn implausibility(
    report: &ZoneReport,
    zone: &Zone,
    probe_sigma_c: &[Option<f64>],
) -> Option<&'static str> {
    let numbers = [
        report.hot_face_c,
        report.shell_c,
        report.flux_hot_face_w_m2,
        report.flux_shell_w_m2,
        report.heat_loss_w,
        report.source_w_m3,
        report.flux_surface_w_m2,
        report.stored_w_m2,
        report.thermal_resistance_m2k_w,
        report.lining_remaining_mm,
        report.hot_face_rate_c_per_h,
    ];
    let interfaces = report.interface_c.iter().flatten().copied().map(Some);
    if numbers
        .into_iter()
        .chain(interfaces)
        .flatten()
        .any(|v| !v.is_finite())
    {
        return Some("a number of the model came out not finite: the model's numbers are withheld (check the zone's configuration)");
    }
    let fluxes = [
        report.flux_hot_face_w_m2,
        report.flux_shell_w_m2,
        report.flux_surface_w_m2,
    ];
    if fluxes
        .into_iter()
        .flatten()
        .any(|q| q.abs() > FLUX_LIMIT_W_M2)
    {
        return Some("a flux came out above 1 MW/m², more than any kiln wall carries: the model's numbers are withheld (check that thickness_mm and depth_mm are in millimetres, and the conductivity)");
    }
    // The readings' part of each σ: a wrong conductivity or probe depth
    // must trip these checks, not widen them.
    let u = report.uncertainty.as_ref();
    let s_hot = u.map_or(0.0, |u| u.readings_only[0]);
    let s_shell = u.map_or(0.0, |u| u.readings_only[1]);
    let air = zone.ambient_c;
    let shell_at = shell_probe(report, zone);
    // (valid probe, its σ) inside the wall (the shell probe aside), by depth.
    let mut inner: HVec<(&ProbeReport, f64), MAX_PROBES> = report
        .probes
        .iter()
        .enumerate()
        .filter(|(i, p)| {
            p.status == Health::Ok
                && p.measured_c.is_some()
                && shell_at.is_none_or(|(_, s)| s != *i)
        })
        .map(|(i, p)| (p, probe_sigma_c.get(i).copied().flatten().unwrap_or(0.0)))
        .collect();
    inner.sort_unstable_by(|a, b| a.0.depth_mm.total_cmp(&b.0.depth_mm));
    let probe_sigma = |i: usize| probe_sigma_c.get(i).copied().flatten().unwrap_or(0.0);
    let not_cooling = |p: &ProbeReport| {
        p.rate_measured_c_per_h
            .is_some_and(|r| r >= -HOLDING_RATE_C_PER_H)
    };
    if let Some(shell) = report.shell_c {
        if shell < air - SHELL_BELOW_AIR_K - VET_COVERAGE * s_shell {
            return Some("the shell estimate lies far below the air temperature, which no kiln shell does: the model's numbers are withheld (check the probe depths and the materials)");
        }
        if let Some((m, i)) = shell_at {
            let s_m = probe_sigma(i);
            if (shell - m).abs() > vet_tolerance(s_shell, s_m) {
                return Some("the shell estimate disagrees with the shell thermocouple: the model's numbers are withheld (check the probe depths and the materials)");
            }
        }
        if let Some(&(deep, s_deep)) = inner.last() {
            let t = deep.measured_c.unwrap_or(f64::NAN);
            if t > air && not_cooling(deep) && shell > t + vet_tolerance(s_shell, s_deep) {
                return Some("the shell estimate is hotter than the probe inside it while heat flows outward: the model's numbers are withheld");
            }
        }
    }
    if let Some(hot) = report.hot_face_c {
        if let (Some(&(first, s1)), Some(&(second, _))) = (inner.first(), inner.get(1)) {
            let t1 = first.measured_c.unwrap_or(f64::NAN);
            let t2 = second.measured_c.unwrap_or(f64::NAN);
            if not_cooling(first) && t1 > t2 && hot < t1 - vet_tolerance(s_hot, s1) {
                return Some("the hot face estimate is below the shallowest probe while the wall is heating or holding: the model's numbers are withheld (check the probe depths and the materials)");
            }
        }
        if let Some(sp) = zone.firing_setpoint_c {
            if hot > sp + HOT_FACE_OVER_SETPOINT_K + VET_COVERAGE * s_hot {
                return Some("the hot face estimate is far above firing_setpoint_c: the model's numbers are withheld");
            }
        }
    }
    // Heat loss sign against the shell and the air.
    let shell_t = shell_at.map(|(t, _)| t).or(report.shell_c);
    if let Some(ts) = shell_t {
        let margin = VET_COVERAGE * s_shell + VET_FLOOR_K;
        let s_q = u.map_or(0.0, |u| u.readings_only[2]);
        let slack_w_m2 = VET_COVERAGE * s_q + 1.0;
        let flux = report
            .flux_shell_w_m2
            .or(report.heat_loss_w.map(|w| w / zone.area_m2));
        if let Some(q) = flux {
            if ts > air + margin && q < -slack_w_m2 {
                return Some("the heat loss comes out negative although the shell is hotter than the air: the model's numbers are withheld (the wall is far from the state the model assumes, or a probe or the materials are wrong)");
            }
            if ts < air - margin && q > slack_w_m2 {
                return Some("the heat loss comes out positive although the shell is colder than the air: the model's numbers are withheld");
            }
        }
    }
    None
}
