//! The command line through the real binary: exit codes and messages of
//! `check` and `tc`, and `analyze` against closed-form walls.

use crate::common::*;

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn check_accepts_the_shipped_configs() {
    for f in ["config/example.toml", "config/demo.toml"] {
        let path = format!("{}/{f}", env!("CARGO_MANIFEST_DIR"));
        let o = run(&["check", "--config", &path]);
        assert_eq!(o.status.code(), Some(0), "{f}: {}", stderr(&o));
        let out = String::from_utf8_lossy(&o.stdout);
        assert!(out.contains("configuration ok"), "{out}");
    }
    let o = run(&[
        "check",
        "--config",
        &format!("{}/config/demo.toml", env!("CARGO_MANIFEST_DIR")),
    ]);
    let out = String::from_utf8_lossy(&o.stdout);
    // Three zones, thirteen probes in the demo.
    assert_eq!(out.matches("  zone ").count(), 3, "{out}");
    assert_eq!(out.matches("    probe ").count(), 13, "{out}");
}

#[test]
fn broken_configs_exit_2_naming_the_culprit() {
    let dir = temp_dir("cli-broken");
    let good = one_zone_config("/dev/null", 1883, 1.2, 300.0, &[30.0, 150.0, 300.0], 10.0);
    let cases = [
        (
            good.replace("depth_mm = 150", "depth_mm = 450"),
            "zone[0].probes[1].depth_mm",
        ),
        (
            good.replace("type = \"K\"", "type = \"X\""),
            "channel[0].type",
        ),
        (good.replace("[log]", "[log]\ncolour = true"), "colour"),
        (
            good.replace("source = \"box\"", "source = \"bx\""),
            "channel[0].source",
        ),
        (
            good.replace("conductivity_w_mk = 1.2", "conductivity_w_mk = \"high\""),
            "conductivity_w_mk",
        ),
    ];
    for (i, (text, culprit)) in cases.iter().enumerate() {
        let p = write(&dir, &format!("bad{i}.toml"), text);
        let o = run(&["check", "--config", p.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(2), "case {i}");
        let e = stderr(&o);
        assert!(e.contains(culprit), "case {i}: {e}");
        assert!(
            e.contains(&format!("bad{i}.toml:")),
            "case {i} names no line: {e}"
        );
    }
    let o = run(&["check", "--config", "/nonexistent/wallflux.toml"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("/nonexistent/wallflux.toml"));
    let o = run(&["check"]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "missing --config is a usage error"
    );
    let o = run(&["frobnicate"]);
    assert_eq!(o.status.code(), Some(2));
}

/// `wallflux tc` against NIST ITS-90 type K table values (NIST SRD 60,
/// type_K.tab: 500 °C → 20.644 mV) and the cold-junction case of
/// docs/references.md (4.096 mV at 25 °C terminals → 124.31 °C).
#[test]
fn tc_converts_both_ways() {
    let o = run(&["tc", "--type", "K", "--celsius", "500", "--json"]);
    assert_eq!(o.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["type"], "K");
    assert_eq!(v["celsius"], 500.0);
    assert!((v["millivolts"].as_f64().unwrap() - 20.644).abs() < 0.0005);

    let o = run(&[
        "tc", "--type", "K", "--mv", "4.096", "--cj-c", "25", "--json",
    ]);
    assert_eq!(o.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(
        (v["celsius"].as_f64().unwrap() - 124.31).abs() < 0.01,
        "{v}"
    );
    assert_eq!(v["cj_c"], 25.0);

    let o = run(&["tc", "--type", "K", "--mv", "-18.644", "--cj-c", "25"]);
    assert_eq!(
        o.status.code(),
        Some(2),
        "reversed polarity is out of range"
    );
    assert!(
        stderr(&o).to_lowercase().contains("range"),
        "{}",
        stderr(&o)
    );
    let o = run(&["tc", "--type", "K", "--celsius", "1500"]);
    assert_eq!(o.status.code(), Some(2));
    let o = run(&["tc", "--type", "Z", "--celsius", "100"]);
    assert_eq!(o.status.code(), Some(2));
    let o = run(&["tc", "--type", "K"]);
    assert_eq!(o.status.code(), Some(2), "neither --celsius nor --mv");
}

/// Steady slab with a uniform volumetric source (Incropera, Fundamentals of
/// Heat and Mass Transfer, §3.5: k T'' = −q‴ integrated twice):
/// q(x) = q0 + q‴ x, T(x) = T0 − (q0/k) x − (q‴ / 2k) x².
/// With q0 = 1500 W/m², q‴ = −1000 W/m³ (a sink), k = 1.2 W/mK, L = 0.3 m,
/// T0 = 1100 °C: q(L) = 1200 W/m², source = (q(L) − q(0))/L = −1000 W/m³.
#[test]
fn analyze_reproduces_a_closed_form_wall() {
    let (k, l, q0, qs, t0) = (1.2, 0.3, 1500.0, -1000.0, 1100.0);
    let temp = |x: f64| t0 - q0 / k * x - qs / (2.0 * k) * x * x;
    let depths = [30.0, 100.0, 200.0, 300.0];
    let dir = temp_dir("cli-analyze");
    // A measured combined surface coefficient to 25 °C air that meets the
    // shell balance q(L) = h (T(L) − 25): 1200 / 737.5 = 1.6271 W/m²K. (A
    // coefficient the wall contradicts would make the three-probe fit,
    // which its probes cannot check, `unconfirmed`.)
    let h = (q0 + qs * l) / (temp(l) - 25.0);
    let cfg_text = one_zone_config("/dev/null", 1883, k, l * 1000.0, &depths, 10.0).replace(
        "model = \"quadratic\"",
        &format!("model = \"quadratic\"\nsurface_h_w_m2k = {h}\nambient_c = 25.0"),
    );
    let cfg = write(&dir, "wall.toml", &cfg_text);
    let mut csv = String::from("time,channel,value\n");
    let t_start = 1_800_000_000.0;
    for s in 0..=60 {
        let t = t_start + f64::from(s) * 10.0;
        for (i, d) in depths.iter().enumerate() {
            // An open probe for the second half of the record: the zone
            // must degrade to three probes and keep exact numbers.
            if i == 1 && s > 30 {
                csv += &format!("{t},p{i},open\n");
            } else {
                csv += &format!("{t},p{i},{:.4}\n", temp(d / 1000.0));
            }
        }
    }
    csv += "garbage line\n";
    let samples = write(&dir, "samples.csv", &csv);
    let o = run(&[
        "analyze",
        "--config",
        cfg.to_str().unwrap(),
        "--samples",
        samples.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("samples.csv:"),
        "the garbage line is reported: {}",
        stderr(&o)
    );
    let lines: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    // One state per interval: due at +10 s .. +600 s.
    assert_eq!(lines.len(), 60);
    for (n, v) in lines.iter().enumerate() {
        assert_eq!(v["zone"], "wall");
        assert_eq!(v["schema"], "wallflux.zone/1");
        let rel = |key: &str, want: f64| {
            let got = v[key]
                .as_f64()
                .unwrap_or_else(|| panic!("state {n}: {key} missing: {v}"));
            assert!(
                ((got - want) / want).abs() < 0.005,
                "state {n}: {key} = {got}, want {want}"
            );
        };
        rel("flux_hot_face_w_m2", q0);
        rel("flux_shell_w_m2", q0 + qs * l);
        rel("heat_loss_w", (q0 + qs * l) * 10.0);
        rel("source_w_m3", qs);
        rel("hot_face_c", t0);
        rel("shell_c", temp(l));
        rel("flux_surface_w_m2", h * (temp(l) - 25.0));
        let mismatch = v["balance_mismatch_pct"].as_f64().unwrap();
        assert!(mismatch.abs() < 0.5, "state {n}: mismatch {mismatch} %");
        let status = v["status"].as_str().unwrap();
        let open = v["probes"][1]["status"].as_str().unwrap();
        // State n is due at +10 (n + 1) s and holds the rows of that time:
        // the probe opens in the row at +310 s, state 30.
        if n >= 30 {
            assert_eq!(status, "degraded", "state {n}");
            assert_eq!(open, "open");
            assert_eq!(v["probes_used"], 3);
        } else {
            assert_eq!(status, "ok", "state {n}");
        }
    }
    // A steady wall: measured and model rates are zero (to rounding).
    let last = &lines[59];
    for p in last["probes"].as_array().unwrap() {
        if let Some(r) = p["rate_measured_c_per_h"].as_f64() {
            assert!(r.abs() < 0.05, "{p}");
        }
    }

    // Every output: the same zone states, and after each the kiln state of
    // its instant (one zone: the kiln loses what the zone loses), the
    // probe's health change, the channel states.
    let args = |outputs: &str| {
        run(&[
            "analyze",
            "--config",
            cfg.to_str().unwrap(),
            "--samples",
            samples.to_str().unwrap(),
            "--outputs",
            outputs,
        ])
    };
    let o = args("all");
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let all: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let of = |kind: &str| -> Vec<&serde_json::Value> {
        all.iter()
            .filter(|l| l["kind"] == kind)
            .map(|l| &l["output"])
            .collect()
    };
    let zones = of("zone_state");
    assert_eq!(zones.len(), lines.len());
    assert!(zones.iter().zip(&lines).all(|(a, b)| *a == b));
    let kilns = of("kiln_state");
    assert_eq!(kilns.len(), zones.len());
    for (k, z) in kilns.iter().zip(&zones) {
        assert_eq!(k["time"], z["time"]);
        assert_eq!(k["heat_loss_w"], z["heat_loss_w"]);
    }
    // Energy: 60 intervals of 10 s at the zone's loss, E = P t.
    let want_kwh = (q0 + qs * l) * 10.0 * 600.0 / 3.6e6;
    let got_kwh = kilns[59]["energy_total_kwh"].as_f64().unwrap();
    assert!(
        (got_kwh - want_kwh).abs() < 0.005 * want_kwh,
        "{got_kwh} kWh"
    );
    let opened: Vec<_> = of("channel_health")
        .into_iter()
        .filter(|c| c["channel"] == "p1" && c["to"] == "open")
        .collect();
    assert_eq!(opened.len(), 1, "{all:?}");
    assert!(!of("channel_state").is_empty());

    let o = args("some");
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("zone_states or all"), "{}", stderr(&o));
}

/// A record with a gap of a year (a logger stopped over the summer): the
/// zone says once that it has no data, then resumes at the interval
/// boundary before the readings come back, instead of writing one state
/// per empty 10 s interval (3.2 million of them).
#[test]
fn analyze_across_a_long_gap_publishes_the_gap_once() {
    let depths = [30.0, 100.0, 200.0, 300.0];
    let dir = temp_dir("cli-analyze-gap");
    let cfg = write(
        &dir,
        "wall.toml",
        &one_zone_config("/dev/null", 1883, 1.2, 300.0, &depths, 10.0),
    );
    let temp = |d: f64| 1000.0 - 2.5 * d;
    let mut csv = String::from("time,channel,value\n");
    let year_s = 365.0 * 86400.0;
    for t0 in [1_800_000_000.0, 1_800_000_000.0 + year_s] {
        for s in 0..=30 {
            let t = t0 + f64::from(s) * 10.0;
            for (i, d) in depths.iter().enumerate() {
                csv += &format!("{t},p{i},{:.2}\n", temp(*d));
            }
        }
    }
    let states: Vec<serde_json::Value> = analyze_csv(&dir, &cfg, &csv)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert!(states.len() < 100, "{} states", states.len());
    let status = |v: &serde_json::Value| v["status"].as_str().unwrap().to_string();
    let empty = states
        .iter()
        .filter(|v| status(v) == "insufficient_data")
        .count();
    assert!((1..=2).contains(&empty), "{empty} empty states");
    // The readings after the gap are analysed as before it.
    let ok_after = states
        .iter()
        .filter(|v| status(v) == "ok" && v["time"].as_str().is_some_and(|t| t.starts_with("2028")))
        .count();
    assert!(
        ok_after >= 25,
        "{ok_after} ok states after the gap: {states:?}"
    );
}
