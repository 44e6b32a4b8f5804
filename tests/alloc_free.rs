//! The hot paths allocate nothing in steady state (DEVELOPERS.md quality bars):
//! a counting global allocator around the engine's per-sample and
//! per-zone-cycle calls, and the line parser's per-byte path.

mod common;
#[path = "common/counting.rs"]
mod counting;

#[test]
fn engine_and_parser_do_not_allocate_in_steady_state() {
    let depths = [20.0, 60.0, 110.0, 160.0, 210.0, 260.0, 300.0, 340.0];
    let text = common::one_zone_config("/dev/null", 1883, 1.2, 350.0, &depths, 1.0).replace(
        "conductivity_w_mk = 1.2",
        "conductivity_w_mk = [[200.0, 1.0], [1200.0, 1.4]]",
    );
    let counted = counting::steady_zone(&text, &depths, 200, 200);
    assert_eq!(
        counted.probes,
        200 * depths.len(),
        "a zone state every second"
    );
    assert_eq!(
        counted.allocations, 0,
        "allocations in 200 steady-state cycles"
    );
}
