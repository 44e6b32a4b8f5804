//! The input-neutral scan: what every decoder hands the monitor.
//!
//! A source (a box on a serial line today, a Modbus slave later) reads its
//! inputs in rounds; one round is a [`Scan`]: each input's address and its
//! [`Reading`], the source's cold-junction temperature when it sends one,
//! and what the source's sequence says about rounds lost before this one.
//! Decoders build scans from their own frames (`line::to_scan`); the monitor
//! knows only this module, so a new input kind adds a decoder, not a monitor
//! path. Bounded (`heapless`): building or reading a scan never allocates.

/// Most readings in one scan (the line protocol's 64 inputs).
pub const MAX_READINGS: usize = 64;

/// Where a reading comes from on its source: the number the configuration
/// gives as a channel's `input`.
pub type InputAddress = u8;

/// The unit a source measured a value in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// A linearised temperature, °C.
    Celsius,
    /// A raw thermocouple EMF, mV, to be cold-junction compensated.
    Millivolts,
}

/// One input's reading in a scan.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Reading {
    /// A finite number in `unit`.
    Measured { value: f64, unit: Unit },
    /// The source detected an open sensor circuit.
    Open,
}

/// One round of readings from one source.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Scan {
    /// `(input, reading)`; each input at most once.
    pub readings: heapless::Vec<(InputAddress, Reading), MAX_READINGS>,
    /// The cold-junction temperature the source measured with this scan, °C.
    pub cj_c: Option<f64>,
    /// Scans the source's sequence says were lost just before this one.
    pub lost_before: u32,
    /// The source's sequence restarted (it was reset or power-cycled).
    pub source_restarted: bool,
}

impl Scan {
    /// The reading of `input`, if the scan carries it.
    pub fn reading(&self, input: InputAddress) -> Option<Reading> {
        self.readings
            .iter()
            .find(|(i, _)| *i == input)
            .map(|&(_, r)| r)
    }
}
