//! The hot paths allocate nothing in steady state (DEVELOPERS.md quality bars):
//! a counting global allocator around the engine's per-sample and
//! per-zone-cycle calls, and the line parser's per-byte path.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;

use wallflux::acquire::line::{encode_frame, LineParser, Unit, Value, MAX_LINE_BYTES};
use wallflux::config;
use wallflux::monitor::Monitor;
use wallflux::time::Timestamp;

struct Counting;
static ALLOCS: AtomicUsize = AtomicUsize::new(0);

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

mod common;

#[test]
fn engine_and_parser_do_not_allocate_in_steady_state() {
    let depths = [20.0, 60.0, 110.0, 160.0, 210.0, 260.0, 300.0, 340.0];
    let text = common::one_zone_config("/dev/null", 1883, 1.2, 350.0, &depths, 1.0).replace(
        "conductivity_w_mk = 1.2",
        "conductivity_w_mk = [[200.0, 1.0], [1200.0, 1.4]]",
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let mut m = Monitor::new(settings, Timestamp::from_epoch_s(0.0));
    let mut p = LineParser::new();
    let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();

    let mut step = |s: u32, m: &mut Monitor, p: &mut LineParser| -> usize {
        let t = f64::from(s);
        let now = Timestamp::from_epoch_s(t);
        let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
        for (i, d) in depths.iter().enumerate() {
            let v = 1150.0 - 2.5 * d + 0.001 * d * d + 0.02 * t;
            let _ = values.push((
                i as u8 + 1,
                Value::Reading {
                    value: (v * 100.0).round() / 100.0,
                    unit: Unit::Celsius,
                },
            ));
        }
        line.clear();
        encode_frame(s, &values, None, &mut line).unwrap();
        let mut probes = 0;
        for &b in line.as_bytes() {
            if let Some(Ok(frame)) = p.push(b) {
                m.handle_frame(0, &frame, now);
            }
        }
        while let Some(r) = m.poll_zone(now) {
            probes += r.probes.len();
            assert!(r.flux_shell_w_m2.is_some());
        }
        while m.poll_event().is_some() {}
        probes
    };
    // Warm up: histories fill, health events are announced once.
    for s in 0..200 {
        step(s, &mut m, &mut p);
    }
    // The counter is live: one Box is one allocation.
    let probe_before = ALLOCS.load(Ordering::Relaxed);
    drop(std::hint::black_box(Box::new(7u64)));
    assert!(ALLOCS.load(Ordering::Relaxed) > probe_before);

    let before = ALLOCS.load(Ordering::Relaxed);
    let mut probes = 0;
    for s in 200..400 {
        probes += step(s, &mut m, &mut p);
    }
    let after = ALLOCS.load(Ordering::Relaxed);
    assert_eq!(probes, 200 * depths.len(), "a zone state every second");
    assert_eq!(after - before, 0, "allocations in 200 steady-state cycles");
}
