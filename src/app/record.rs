//! `wallflux run --record FILE.csv`: every scan the daemon handles, written
//! as `analyze` samples (`time,channel,value`), so that `analyze` replays
//! exactly what the daemon saw and publishes what it published.
//!
//! Times are epoch seconds and values are written in full (the shortest
//! text that reads back as the same number), so nothing is rounded. The
//! first row, with no channel and no value, is the daemon's start: the
//! replayed monitor starts then, on the same interval grid. A scan's
//! cold junction is a `<source>.cj` row before its readings; inputs that
//! no channel reads are not written.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use tracing::warn;

use crate::config::Settings;
use crate::ids::SourceId;
use crate::protocol::scan::{Reading, Scan};
use crate::time::Timestamp;

/// The recording of one run.
pub struct Recorder {
    out: Option<BufWriter<File>>,
    path: PathBuf,
}

impl Recorder {
    /// Creates (or replaces) `path` and writes the header.
    pub fn create(path: &Path) -> std::io::Result<Self> {
        let mut out = BufWriter::new(File::create(path)?);
        writeln!(out, "time,channel,value")?;
        Ok(Recorder {
            out: Some(out),
            path: path.to_path_buf(),
        })
    }

    /// The start row: the monitor started at `start`.
    pub fn start(&mut self, start: Timestamp) {
        let result = self.write_with(|out| writeln!(out, "{},,", start.epoch_s()));
        self.check(result);
    }

    /// Source `source`'s scan, received at `time`.
    pub fn scan(&mut self, settings: &Settings, source: SourceId, scan: &Scan, time: Timestamp) {
        let t = time.epoch_s();
        let result = self.write_with(|out| {
            if let Some(cj) = scan.cj_c {
                writeln!(out, "{t},{}.cj,{cj}", settings.sources[source].name)?;
            }
            for &(input, reading) in &scan.readings {
                let Some(ch) = settings.channel_for(source, input) else {
                    continue;
                };
                let name = &settings.channels[ch].name;
                match reading {
                    Reading::Measured { value, .. } => writeln!(out, "{t},{name},{value}")?,
                    Reading::Open => writeln!(out, "{t},{name},open")?,
                }
            }
            Ok(())
        });
        self.check(result);
    }

    /// Writes what is buffered to the file.
    pub fn flush(&mut self) {
        let result = self.write_with(|out| out.flush());
        self.check(result);
    }

    fn write_with(
        &mut self,
        f: impl FnOnce(&mut BufWriter<File>) -> std::io::Result<()>,
    ) -> std::io::Result<()> {
        self.out.as_mut().map_or(Ok(()), f)
    }

    /// A failed write stops the recording (said once); the daemon goes on.
    fn check(&mut self, result: std::io::Result<()>) {
        if let Err(e) = result {
            warn!(file = %self.path.display(), error = %e, "cannot write the recording: recording stopped");
            self.out = None;
        }
    }
}
