//! The zone cycle of a steady zone with a transient `fallback` (both
//! models and the post-pass of every cycle) allocates nothing in steady
//! state: the counting allocator of tests/common/counting.rs, in its own
//! test binary so that no other test's allocations are counted.

mod common;
#[path = "common/counting.rs"]
mod counting;

#[test]
fn a_zone_with_a_transient_fallback_does_not_allocate() {
    let depths = [20.0, 60.0, 110.0, 160.0, 210.0, 260.0, 300.0, 340.0];
    let text = common::one_zone_config("/dev/null", 1883, 1.2, 350.0, &depths, 1.0)
        .replace(
            "conductivity_w_mk = 1.2",
            "conductivity_w_mk = [[200.0, 1.0], [1200.0, 1.4]]",
        )
        .replace(
            "model = \"quadratic\"",
            "model = \"quadratic\"\nfallback = \"transient\"",
        );
    assert!(text.contains("fallback"));
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
