//! A thermocouple box on a pseudo-terminal: one line-protocol frame every
//! 100 ms with the values a closure gives (None = open thermocouple).

use std::io::Write;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use wallflux::acquire::line::{encode_frame, Unit, Value, MAX_LINE_BYTES};
use wallflux::sim::pty::Pty;

pub type Values = Arc<dyn Fn(usize, f64) -> Option<f64> + Send + Sync>;

pub struct Feeder {
    stop: Arc<AtomicBool>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl Feeder {
    /// `values(probe index, seconds since start)`; inputs are 1..=n; None
    /// sends `open`, NaN leaves the input out.
    pub fn start(mut pty: Pty, n: usize, values: Values) -> Feeder {
        let stop = Arc::new(AtomicBool::new(false));
        let s = stop.clone();
        let thread = std::thread::spawn(move || {
            let t0 = Instant::now();
            let mut seq = 0u32;
            let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
            while !s.load(Ordering::Relaxed) {
                let t = t0.elapsed().as_secs_f64();
                let mut v: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
                for i in 0..n {
                    let x = match values(i, t) {
                        // NaN: the input is left out of the frame.
                        Some(c) if c.is_nan() => continue,
                        Some(c) => Value::Reading {
                            value: (c * 100.0).round() / 100.0,
                            unit: Unit::Celsius,
                        },
                        None => Value::Open,
                    };
                    let _ = v.push((i as u8 + 1, x));
                }
                line.clear();
                if encode_frame(seq, &v, None, &mut line).is_ok() {
                    let _ = pty.master.write_all(line.as_bytes());
                }
                seq = seq.wrapping_add(1);
                std::thread::sleep(Duration::from_millis(100));
            }
            drop(pty);
        });
        Feeder {
            stop,
            thread: Some(thread),
        }
    }
}

impl Drop for Feeder {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}
