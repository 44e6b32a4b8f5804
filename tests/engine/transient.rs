//! `model = "transient"` through `wallflux analyze`: a heating three-layer
//! wall simulated by the independent finite-difference simulator
//! (`sim::wall`, 40 cells per layer), probes only inside the wall (the hot
//! face is never measured), readings rounded to 0.1 °C with noise.

use crate::common::*;

use std::sync::Arc;

use wallflux::physics::material::{Material, Property};
use wallflux::physics::surface::{Orientation, SurfaceParams};
use wallflux::sim::wall::{Layer, WallSim};

const DEPTHS_MM: [f64; 4] = [40.0, 120.0, 250.0, 355.0];

const MATERIALS: &str = "
[[material]]
name = \"fireclay\"
conductivity_w_mk = [[200.0, 1.05], [1200.0, 1.25]]
density_kg_m3 = 2150.0
specific_heat_j_kgk = 1000.0
max_service_c = 1400.0

[[material]]
name = \"ifb\"
conductivity_w_mk = [[200.0, 0.14], [1200.0, 0.22]]
density_kg_m3 = 500.0
specific_heat_j_kgk = 1000.0
max_service_c = 1000.0

[[material]]
name = \"steel\"
conductivity_w_mk = 50.0
density_kg_m3 = 7800.0
specific_heat_j_kgk = 450.0
";

fn config() -> String {
    let mut s = format!(
        "[site]\nplant = \"p\"\nkiln = \"k\"\n[mqtt]\nhost = \"127.0.0.1\"\n[[source]]\nname = \"box\"\nkind = \"line\"\nport = \"/dev/null\"\n{MATERIALS}\n"
    );
    for i in 0..DEPTHS_MM.len() {
        s += &format!("[[channel]]\nname = \"p{i}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\nuncertainty_c = 0.5\n", i + 1);
    }
    s += "[[zone]]\nname = \"wall\"\narea_m2 = 6.0\nmodel = \"transient\"\ninterval_s = 60\nheight_m = 2.0\nemissivity = 0.8\nambient_c = 25\nforecast_h = [1, 2]\n\
          layers = [{ material = \"fireclay\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }, { material = \"steel\", thickness_mm = 10 }]\nprobes = [";
    for (i, d) in DEPTHS_MM.iter().enumerate() {
        s += &format!("{{ channel = \"p{i}\", depth_mm = {d} }},");
    }
    s + "]\n"
}

fn k(points: &[(f64, f64)]) -> Property {
    Property::table("k", points).unwrap()
}

/// The simulated firing: hot face from 25 °C at 100 °C/h to 1000 °C, then
/// held. Returns the CSV and the true (hot face, shell flux, shell) at the
/// end of each hour.
fn simulate(hours: usize) -> (String, Vec<(f64, f64, f64)>) {
    let mat = |kk: Property, rho: f64, cp: f64| Material {
        conductivity_w_mk: kk,
        density_kg_m3: rho,
        specific_heat_j_kgk: Property::Constant(cp),
        max_service_c: None,
    };
    let layers = vec![
        Layer {
            material: mat(k(&[(200.0, 1.05), (1200.0, 1.25)]), 2150.0, 1000.0),
            thickness_m: 0.23,
        },
        Layer {
            material: mat(k(&[(200.0, 0.14), (1200.0, 0.22)]), 500.0, 1000.0),
            thickness_m: 0.115,
        },
        Layer {
            material: mat(Property::Constant(50.0), 7800.0, 450.0),
            thickness_m: 0.01,
        },
    ];
    let surface = SurfaceParams {
        orientation: Orientation::Vertical,
        length_m: 2.0,
        emissivity: 0.8,
        ambient_c: 25.0,
        surroundings_c: 25.0,
        wind_m_s: None,
    };
    let mut sim = WallSim::new(layers, 40, 25.0, surface).unwrap();
    sim.settle(25.0);
    let mut csv = String::from("time,channel,value\n");
    let mut truth = Vec::new();
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut noise = || {
        // SplitMix64 → uniform in ±0.2 °C (deterministic).
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64 * 0.4 - 0.2
    };
    let t0 = 1_800_000_000u64;
    for s in 1..=(hours * 60) {
        let t = s as f64 * 60.0;
        let hot = (25.0 + 100.0 * t / 3600.0).min(1000.0);
        sim.step(60.0, hot);
        for (i, d) in DEPTHS_MM.iter().enumerate() {
            let v = sim.temperature_at(d / 1000.0) + noise();
            csv += &format!("{},p{i},{:.1}\n", t0 + s as u64 * 60, v);
        }
        if s % 60 == 0 {
            truth.push((hot, sim.flux_at(0.355), sim.shell_c()));
        }
    }
    (csv, truth)
}

#[test]
fn transient_model_estimates_an_unmeasured_hot_face() {
    let (csv, truth) = simulate(12);
    let dir = temp_dir("transient");
    let cfg = write(&dir, "t.toml", &config());
    let out = analyze_csv(&dir, &cfg, &csv);
    let states: Vec<serde_json::Value> = out
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(states.len(), 12 * 60 - 1, "one state per minute");
    // At every full hour after the first three: the hot face within 3 % of
    // the temperature rise (the issue asks for "a few percent"), the shell
    // flux within 10 % of the simulator's, and the hot face inside 3σ.
    for h in 3..12 {
        let v = &states[(h + 1) * 60 - 2];
        let (hot, q_shell, shell) = truth[h];
        let est = v["hot_face_c"].as_f64().unwrap();
        let sigma = v["uncertainty"]["hot_face_c"].as_f64().unwrap();
        let rise = hot - 25.0;
        assert!(
            (est - hot).abs() < 0.03 * rise,
            "hour {}: hot face {est:.1} vs {hot:.1}",
            h + 1
        );
        assert!(
            (est - hot).abs() < 3.0 * sigma + 1.0,
            "hour {}: {est:.1} vs {hot:.1} ± 3×{sigma:.1}",
            h + 1
        );
        let q = v["flux_shell_w_m2"].as_f64().unwrap();
        assert!(
            (q - q_shell).abs() < 0.1 * q_shell.abs().max(50.0),
            "hour {}: q_shell {q:.0} vs {q_shell:.0}",
            h + 1
        );
        assert!(
            (v["shell_c"].as_f64().unwrap() - shell).abs() < 2.0,
            "hour {}: shell",
            h + 1
        );
        assert_eq!(v["model"], "transient");
    }
    // Forecasts and times to limits are present; the two-hour shell
    // forecast made at hour 8 against the simulator at hour 10.
    let at8 = &states[8 * 60 - 1];
    let f2 = at8["forecast"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["horizon_h"] == 2.0)
        .unwrap();
    let shell10 = truth[9].2;
    assert!(
        (f2["shell_c"].as_f64().unwrap() - shell10).abs() < 3.0,
        "2 h shell forecast {} vs {shell10}",
        f2["shell_c"]
    );
    let limits = at8["time_to_limit_h"].as_array().unwrap();
    assert!(limits.iter().any(|l| l["limit"] == "shell_touch"));
    assert!(limits
        .iter()
        .any(|l| l["limit"] == "interface_service" && l["limit_c"] == 1000.0));
    assert!(
        at8["filter_nis"].as_f64().unwrap() < 5.0,
        "filter health {}",
        at8["filter_nis"]
    );

    // The same samples through the library engine directly give the same
    // numbers as the binary's replay (one engine, live or replayed).
    let settings = Arc::new(wallflux::config::parse(&config(), "t", None).unwrap());
    let mut mem = Vec::new();
    let stats = wallflux::app::analyze::replay(
        settings,
        csv.as_bytes(),
        &mut mem,
        "mem",
        wallflux::app::cli::Outputs::ZoneStates,
    )
    .unwrap();
    assert_eq!(stats.states as usize, states.len());
    assert_eq!(
        String::from_utf8(mem).unwrap(),
        out,
        "replay and binary differ"
    );
}
