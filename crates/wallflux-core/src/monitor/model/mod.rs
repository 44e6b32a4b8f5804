//! The wall models behind a zone, one trait for all: `quadratic` and
//! `layered` ([`steady`], stateless, one fit per cycle) and `transient`
//! ([`transient`], a Kalman filter that carries its state from cycle to
//! cycle).
//!
//! The zone cycle ([`super::zone::ZoneEngine::cycle`]) freshens the readings,
//! diagnoses the probes, and hands the valid samples to its model through
//! [`ZoneModel::estimate`]; the model fills the report's model numbers and
//! status, or returns its typed [`ModelError`], which reaches the zone
//! state as its `model_note` (see [`failure`]). Adding a model is one file here that
//! implements [`ZoneModel`], its word in `config::Model`, and one arm in
//! [`build`].

use core::fmt::Write;

use heapless::Vec as HVec;

use super::channel::ChannelState;
use super::lining::Baseline;
use super::wall::WallError;
use super::zone::ZoneReport;
use crate::config::{Model, NamedMaterial, Settings, Zone, MAX_PROBES};
use crate::ids::{ChannelId, IdVec, ZoneId};
use crate::physics::profile::ProbeSample;
use crate::physics::transient::TransientError;
use crate::time::Timestamp;

pub mod steady;
pub mod transient;

/// Longest `model_note`, bytes (every fixed note fits; a test checks).
pub const NOTE_BYTES: usize = 512;

/// A zone state's `model_note`: why the numbers are what they are, in the
/// config's words. Fixed capacity: no heap allocation per cycle.
pub type Note = heapless::String<NOTE_BYTES>;

/// A fixed note.
pub fn note(text: &str) -> Note {
    let mut n = Note::new();
    if n.push_str(text).is_err() {
        // Only a note longer than NOTE_BYTES can fail, and the fixed notes
        // are checked by a test; a general word stands in, never a cut one.
        n.clear();
        n.push_str(NOTE_TOO_LONG).ok();
    }
    n
}

/// A note that says which model failed and the model's own reason.
pub fn failure(model: Model, reason: &dyn core::fmt::Display) -> Note {
    let mut n = Note::new();
    if write!(n, "the {model} model gave no numbers this cycle: {reason}").is_err() {
        n.clear();
        write!(n, "the {model} model gave no numbers this cycle").ok();
    }
    n
}

/// Why a model gave no numbers this cycle.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelError {
    /// A steady wall could not be built or fitted.
    #[error(transparent)]
    Steady(#[from] WallError),
    /// The transient model could not be built or stepped.
    #[error(transparent)]
    Transient(#[from] TransientError),
    /// No valid probe reading: nothing to start from or to correct with.
    #[error("no valid probe reading this cycle (the model needs at least one to start from and to publish its estimate)")]
    NoReadings,
}

/// Stands in for a note that would not fit (never expected: see [`note`]).
const NOTE_TOO_LONG: &str = "the model gave no numbers this cycle";

/// What a model gets every cycle.
pub struct ModelInput<'a> {
    pub settings: &'a Settings,
    /// The zone's id in `settings.zones`.
    pub zone_id: ZoneId,
    pub zone: &'a Zone,
    pub channels: &'a IdVec<ChannelId, ChannelState>,
    /// The valid samples of this cycle (fresh and not faulted by the
    /// diagnostics), in configured probe order.
    pub samples: &'a HVec<ProbeSample, MAX_PROBES>,
    /// Each sample's depth standard uncertainty, m.
    pub depth_sigma_m: &'a HVec<f64, MAX_PROBES>,
    /// Readings older than this are stale, s.
    pub max_age_s: f64,
    pub now: Timestamp,
}

/// One wall model of a zone.
pub trait ZoneModel: core::fmt::Debug + Send {
    /// The model's word (as in the config's `model`).
    fn model(&self) -> Model;

    /// Fills `report`'s model numbers, probe fits and status from `input`
    /// (the report arrives with its measured probes and status
    /// `insufficient_data`). `baseline`: the zone's lining baseline, for a
    /// model that measures the lining's resistance. `Err`: why the model
    /// gave no numbers; the zone publishes it in `model_note`.
    fn estimate(
        &mut self,
        input: &ModelInput<'_>,
        baseline: &mut Baseline,
        report: &mut ZoneReport,
    ) -> Result<(), ModelError>;
}

/// The model `model` for `zone` (its materials from `materials`).
pub fn build(model: Model, zone: &Zone, materials: &[NamedMaterial]) -> Box<dyn ZoneModel> {
    match model {
        Model::Quadratic | Model::Layered => Box::new(steady::Steady::new(model)),
        Model::Transient => Box::new(transient::Transient::new(zone, materials)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::monitor::zone::{
        NOTE_CONTRADICTED, NOTE_FALLBACK, NOTE_NOT_STEADY, NOTE_UNCONFIRMED,
    };

    #[test]
    fn every_fixed_note_fits() {
        for text in [
            NOTE_FALLBACK,
            NOTE_NOT_STEADY,
            NOTE_CONTRADICTED,
            NOTE_UNCONFIRMED,
            transient::NOTE_RESET,
        ] {
            assert_eq!(note(text).as_str(), text);
        }
        let long = "x".repeat(NOTE_BYTES + 1);
        assert_eq!(note(&long).as_str(), NOTE_TOO_LONG);
    }

    #[test]
    fn a_failure_names_the_model_and_its_reason() {
        let n = failure(
            Model::Layered,
            &"too few distinct probe depths: have 1, need 2",
        );
        assert_eq!(
            n.as_str(),
            "the layered model gave no numbers this cycle: too few distinct probe depths: have 1, need 2"
        );
        let long = "y".repeat(NOTE_BYTES);
        assert_eq!(
            failure(Model::Quadratic, &long).as_str(),
            "the quadratic model gave no numbers this cycle"
        );
    }
}
