//! A counting global allocator and a steady zone driven through the real
//! line parser and `Monitor`, shared by the allocation tests. Each such test
//! is its own binary (include this file with `#[path]`), so that no other
//! test's allocations are counted.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

use wallflux::acquire::line::{encode_frame, to_scan, LineParser, Unit, Value, MAX_LINE_BYTES};
use wallflux::config;
use wallflux::monitor::output::{Output, ZoneState};
use wallflux::monitor::Monitor;
use wallflux::time::Timestamp;

pub struct Counting;
pub static ALLOCS: AtomicUsize = AtomicUsize::new(0);

// SAFETY: forwards to the system allocator unchanged; only counts.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, l: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.alloc(l) }
    }
    unsafe fn dealloc(&self, p: *mut u8, l: Layout) {
        // SAFETY: same contract as the caller's.
        unsafe { System.dealloc(p, l) }
    }
    unsafe fn realloc(&self, p: *mut u8, l: Layout, n: usize) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        // SAFETY: same contract as the caller's.
        unsafe { System.realloc(p, l, n) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Allocations so far.
pub fn allocations() -> usize {
    ALLOCS.load(Ordering::Relaxed)
}

/// What `steady_zone` saw in its counted seconds.
pub struct Counted {
    /// Probe readings in the zone states published while counting.
    pub probes: usize,
    /// Heap allocations while counting.
    pub allocations: usize,
}

/// Drives the zone of `config_text` (channels 1.. at `depths_mm`, one frame
/// a second) with a curved profile that heats uniformly at the rate its own
/// curvature gives, ρc_p ∂T/∂t = k T'' ≈ 1.2 × 2000 / 2e6 °C/s (the state a
/// steady quadratic model can vouch for) through the line parser and
/// the monitor: `warm_s` seconds to fill histories and announce health, then
/// `counted_s` seconds with the allocations counted, in which every zone
/// state must carry a shell flux.
pub fn steady_zone(config_text: &str, depths_mm: &[f64], warm_s: u32, counted_s: u32) -> Counted {
    let settings = Arc::new(config::parse(config_text, "t", None).unwrap());
    let source = settings.sources.ids().next().expect("a source");
    let mut m = Monitor::new(settings, Timestamp::from_epoch_s(0.0));
    let mut p = LineParser::new();
    let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();

    let mut step = |s: u32, m: &mut Monitor, p: &mut LineParser| -> usize {
        let t = f64::from(s);
        let now = Timestamp::from_epoch_s(t);
        let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
        for (i, d) in depths_mm.iter().enumerate() {
            let v = 1150.0 - 2.5 * d + 0.001 * d * d + 0.0012 * t;
            values
                .push((
                    i as u8 + 1,
                    Value::Reading {
                        value: (v * 100.0).round() / 100.0,
                        unit: Unit::Celsius,
                    },
                ))
                .expect("at most 64 channels");
        }
        line.clear();
        encode_frame(s, &values, None, &mut line).unwrap();
        let mut probes = 0;
        for &b in line.as_bytes() {
            if let Some(Ok(frame)) = p.push(b) {
                m.handle_scan(source, &to_scan(&frame), now);
            }
        }
        m.handle_timeout(now);
        while let Some(o) = m.poll_output() {
            let Output::ZoneState(ZoneState { report: r, .. }) = o else {
                continue;
            };
            probes += r.probes.len();
            if s >= warm_s {
                assert!(
                    r.flux_shell_w_m2.is_some(),
                    "t={s} s: {:?}, {:?}",
                    r.status,
                    r.model_note
                );
            }
        }
        probes
    };
    for s in 0..warm_s {
        step(s, &mut m, &mut p);
    }
    // The counter is live: one Box is one allocation.
    let probe_before = allocations();
    drop(std::hint::black_box(Box::new(7u64)));
    assert!(
        allocations() > probe_before,
        "the counting allocator counts"
    );

    let before = allocations();
    let mut probes = 0;
    for s in warm_s..warm_s + counted_s {
        probes += step(s, &mut m, &mut p);
    }
    Counted {
        probes,
        allocations: allocations() - before,
    }
}
