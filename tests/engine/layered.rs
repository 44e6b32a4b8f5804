//! `model = "layered"` through `wallflux analyze` against closed forms.

use crate::common::*;

fn config(layers: &str, materials: &str, probes: &[(usize, f64)]) -> String {
    let mut s = format!(
        "[site]\nplant = \"p\"\nkiln = \"k\"\n[mqtt]\nhost = \"127.0.0.1\"\n[[source]]\nname = \"box\"\nkind = \"line\"\nport = \"/dev/null\"\n{materials}\n"
    );
    for (i, _) in probes.iter().enumerate() {
        s += &format!("[[channel]]\nname = \"p{i}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\nuncertainty_c = 0.5\n", i + 1);
    }
    s += &format!("[[zone]]\nname = \"wall\"\narea_m2 = 4.0\nmodel = \"layered\"\ninterval_s = 10\nlayers = [{layers}]\nprobes = [");
    for (i, (_, d)) in probes.iter().enumerate() {
        s += &format!("{{ channel = \"p{i}\", depth_mm = {d} }},");
    }
    s + "]\n"
}

fn analyze(cfg: &str, temps: &[f64], name: &str) -> serde_json::Value {
    let dir = temp_dir(name);
    let c = write(&dir, "w.toml", cfg);
    let mut csv = String::from("time,channel,value\n");
    for s in 0..=6 {
        for (i, t) in temps.iter().enumerate() {
            csv += &format!("{},p{i},{:.3}\n", 1_800_000_000 + s * 10, t);
        }
    }
    let out = analyze_csv(&dir, &c, &csv);
    serde_json::from_str(out.lines().last().expect("a zone state")).unwrap()
}

fn close(v: &serde_json::Value, want: f64, rel: f64, what: &str) {
    let got = v.as_f64().unwrap_or_else(|| panic!("{what} missing"));
    assert!(
        ((got - want) / want).abs() <= rel,
        "{what}: {got} vs {want}"
    );
}

/// Three layers, constant k: the series thermal circuit (Incropera,
/// Fundamentals of Heat and Mass Transfer, ch. 3): q = ΔT / Σ(Lᵢ/kᵢ).
/// 230 mm k 1.30, 115 mm k 0.17, 10 mm k 50, hot face 1200 °C, shell
/// 120.09 °C → q = 1265.14 W/m², interfaces 976.17 and 120.34 °C (the
/// composite-wall case of docs/references.md).
#[test]
fn three_layer_wall_series_resistance() {
    let mats = "[[material]]\nname = \"fireclay\"\nconductivity_w_mk = 1.30\ndensity_kg_m3 = 2150.0\nspecific_heat_j_kgk = 1000.0\n\
                [[material]]\nname = \"ifb\"\nconductivity_w_mk = 0.17\ndensity_kg_m3 = 490.0\nspecific_heat_j_kgk = 1000.0\n\
                [[material]]\nname = \"steel\"\nconductivity_w_mk = 50.0\ndensity_kg_m3 = 7800.0\nspecific_heat_j_kgk = 450.0\n";
    let layers = "{ material = \"fireclay\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }, { material = \"steel\", thickness_mm = 10 }";
    let r = [0.23 / 1.30, 0.115 / 0.17, 0.01 / 50.0];
    let q = (1200.0 - 120.09) / r.iter().sum::<f64>();
    assert!((q - 1265.14).abs() < 0.01, "the closed form itself: {q}");
    let t_at = |x: f64| {
        if x <= 0.23 {
            1200.0 - q * x / 1.30
        } else if x <= 0.345 {
            1200.0 - q * r[0] - q * (x - 0.23) / 0.17
        } else {
            1200.0 - q * (r[0] + r[1]) - q * (x - 0.345) / 50.0
        }
    };
    let depths = [40.0, 120.0, 200.0, 260.0, 320.0, 355.0];
    let temps: Vec<f64> = depths.iter().map(|d| t_at(d / 1000.0)).collect();
    let probes: Vec<(usize, f64)> = depths.iter().enumerate().map(|(i, d)| (i, *d)).collect();
    let v = analyze(&config(layers, mats, &probes), &temps, "layered-series");
    assert_eq!(v["model"], "layered");
    assert_eq!(v["status"], "ok", "{v}");
    assert_eq!(v["model_check"], "consistent");
    close(&v["flux_shell_w_m2"], 1265.14, 0.005, "flux");
    close(&v["heat_loss_w"], 1265.14 * 4.0, 0.005, "heat loss");
    close(&v["hot_face_c"], 1200.0, 0.005, "hot face");
    close(&v["interface_c"][0], 976.17, 0.005, "interface 1");
    close(&v["interface_c"][1], 120.34, 0.005, "interface 2");
    close(
        &v["thermal_resistance_m2k_w"],
        r.iter().sum(),
        0.005,
        "resistance",
    );
    assert!(v["uncertainty"]["interface_c"][0].as_f64().unwrap() > 0.0);
}

/// A lining with k(T) = k0 (1 + bT) (k0 0.9, b 5e-4, as an exactly linear
/// table) behind which lie insulating brick and steel. Kirchhoff transform
/// (Incropera §3.2, variable conductivity): k0 (T + bT²/2) falls linearly
/// with x at slope q, so T(x) = (−1 + √(1 + 2b [T_h + bT_h²/2 − q x / k0])) / b
/// in the lining; the constant-k layers are linear. q = 1000 W/m²,
/// T_h = 1200 °C.
#[test]
fn lining_with_linear_conductivity() {
    let (k0, b, th, q) = (0.9, 5e-4, 1200.0, 1000.0);
    let mats = format!(
        "[[material]]\nname = \"lining\"\nconductivity_w_mk = [[0.0, {k0}], [1400.0, {}]]\ndensity_kg_m3 = 2200.0\nspecific_heat_j_kgk = 1000.0\n\
         [[material]]\nname = \"ifb\"\nconductivity_w_mk = 0.17\ndensity_kg_m3 = 490.0\nspecific_heat_j_kgk = 1000.0\n\
         [[material]]\nname = \"steel\"\nconductivity_w_mk = 50.0\ndensity_kg_m3 = 7800.0\nspecific_heat_j_kgk = 450.0\n",
        k0 * (1.0 + b * 1400.0)
    );
    let layers = "{ material = \"lining\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }, { material = \"steel\", thickness_mm = 10 }";
    let lining =
        |x: f64| (-1.0 + (1.0 + 2.0 * b * (th + b * th * th / 2.0 - q * x / k0)).sqrt()) / b;
    let t1 = lining(0.23);
    let t2 = t1 - q * 0.115 / 0.17;
    let t_at = |x: f64| {
        if x <= 0.23 {
            lining(x)
        } else if x <= 0.345 {
            t1 - q * (x - 0.23) / 0.17
        } else {
            t2 - q * (x - 0.345) / 50.0
        }
    };
    let depths = [30.0, 90.0, 160.0, 230.0, 290.0, 355.0];
    let temps: Vec<f64> = depths.iter().map(|d| t_at(d / 1000.0)).collect();
    let probes: Vec<(usize, f64)> = depths.iter().enumerate().map(|(i, d)| (i, *d)).collect();
    let v = analyze(&config(layers, &mats, &probes), &temps, "layered-kt");
    assert_eq!(v["model_check"], "consistent", "{v}");
    close(&v["flux_shell_w_m2"], q, 0.005, "flux");
    close(&v["hot_face_c"], th, 0.005, "hot face");
    close(&v["interface_c"][0], t1, 0.005, "interface 1");
    close(&v["interface_c"][1], t2, 0.005, "interface 2");
    // The same data under a wrong assumption: the quadratic model is not
    // allowed across layers at all (exit 2 naming the key).
    let dir = temp_dir("layered-quadratic");
    let bad = write(
        &dir,
        "q.toml",
        &config(layers, &mats, &probes).replace("model = \"layered\"", "model = \"quadratic\""),
    );
    let o = run(&["check", "--config", bad.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("zone[0].model"));
}

/// A heating wall (curved profile, Incropera eq. 5.57 erf form) under the
/// steady layered model: the check says contradicted and the zone withholds
/// its numbers instead of publishing confident ones.
#[test]
fn transient_data_contradict_the_steady_model() {
    let mats = "[[material]]\nname = \"brick\"\nconductivity_w_mk = 1.0\ndensity_kg_m3 = 2000.0\nspecific_heat_j_kgk = 1000.0\n";
    let layers = "{ material = \"brick\", thickness_mm = 300 }";
    // Surface stepped from 20 to 1000 °C an hour ago, α = 5e-7 m²/s.
    let erf = |x: f64| {
        // Abramowitz & Stegun 7.1.26 (|error| < 1.5e-7).
        let t = 1.0 / (1.0 + 0.327_591_1 * x);
        1.0 - t
            * (0.254_829_592
                + t * (-0.284_496_736
                    + t * (1.421_413_741 + t * (-1.453_152_027 + t * 1.061_405_429))))
            * (-x * x).exp()
    };
    let t_at = |x: f64| 1000.0 + (20.0 - 1000.0) * erf(x / (2.0 * (5e-7f64 * 3600.0).sqrt()));
    let depths = [10.0, 30.0, 60.0, 100.0];
    let temps: Vec<f64> = depths.iter().map(|d| t_at(d / 1000.0)).collect();
    let probes: Vec<(usize, f64)> = depths.iter().enumerate().map(|(i, d)| (i, *d)).collect();
    let v = analyze(&config(layers, mats, &probes), &temps, "layered-transient");
    assert_eq!(v["model_check"], "contradicted", "{v}");
    // The readings of the record do not change (one profile, repeated), so
    // the zone cannot call it a heat-up: the probes contradict the model
    // on a wall that is not changing, and its numbers are withheld.
    assert_eq!(v["status"], "contradicted");
    assert!(
        v["hot_face_c"].is_null() && v["heat_loss_w"].is_null(),
        "{v}"
    );
    assert!(v["model_note"].as_str().unwrap().contains("disagree"));
}

/// Lining wear, sized and seen against the commissioning baseline. Two
/// layers with constant k (series thermal circuit, Incropera ch. 3): a
/// 230 mm lining (k 1.30) and 115 mm insulating brick (k 0.17), the hot face
/// read by a thermocouple at 1200 °C. Commissioning (the first 0.005 days)
/// with the full lining at q = 1300 W/m²; then the lining worn to 160 mm
/// (its face 70 mm deeper than built) at q = 1400 W/m². Expected: the
/// remaining thickness 160 mm within its reported uncertainty, and the
/// measured resistance (T_hot − T_shell)/q down from
/// 0.23/1.3 + 0.115/0.17 = 0.853394 to 0.16/1.3 + 0.115/0.17 = 0.799548 m²K/W:
/// −6.31 %.
#[test]
fn worn_lining_is_sized_and_seen_against_its_baseline() {
    let mats = "[[material]]\nname = \"lining\"\nconductivity_w_mk = 1.30\ndensity_kg_m3 = 2150.0\nspecific_heat_j_kgk = 1000.0\n\
                [[material]]\nname = \"ifb\"\nconductivity_w_mk = 0.17\ndensity_kg_m3 = 490.0\nspecific_heat_j_kgk = 1000.0\n";
    let layers =
        "{ material = \"lining\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }";
    let depths = [100.0, 180.0, 260.0, 330.0];
    let probes: Vec<(usize, f64)> = depths.iter().enumerate().map(|(i, d)| (i, *d)).collect();
    let cfg = config(layers, mats, &probes)
        .replace("[[zone]]", "[[channel]]\nname = \"hf\"\nsource = \"box\"\ninput = 20\ntype = \"B\"\nuncertainty_c = 2.0\n\n[[zone]]")
        .replace("model = \"layered\"", "model = \"layered\"\nhot_face_channel = \"hf\"\nbaseline_days = 0.005\nlining_min_mm = 180");
    // Temperature at depth d (from the face as built) for a lining of
    // `lining_m` and flux q, hot face 1200 °C.
    let t_at = |d: f64, lining_m: f64, q: f64| {
        let worn = 0.23 - lining_m;
        if d <= 0.23 {
            1200.0 - q * (d - worn) / 1.30
        } else {
            1200.0 - q * lining_m / 1.30 - q * (d - 0.23) / 0.17
        }
    };
    let dir = temp_dir("layered-wear");
    let c = write(&dir, "w.toml", &cfg);
    let mut csv = String::from("time,channel,value\n");
    for s in 0..=150 {
        let (lining, q) = if s < 60 {
            (0.23, 1300.0)
        } else {
            (0.16, 1400.0)
        };
        let t = 1_800_000_000 + s * 10;
        for (i, d) in depths.iter().enumerate() {
            csv += &format!("{t},p{i},{:.3}\n", t_at(d / 1000.0, lining, q));
        }
        csv += &format!("{t},hf,1200.0\n");
    }
    let states: Vec<serde_json::Value> = analyze_csv(&dir, &c, &csv)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let commissioning = &states[30];
    close(
        &commissioning["lining_remaining_mm"],
        230.0,
        0.01,
        "full lining",
    );
    assert!(
        commissioning["resistance_change_pct"].is_null(),
        "still learning"
    );
    let last = states.last().unwrap();
    let remaining = last["lining_remaining_mm"].as_f64().unwrap();
    let sigma = last["uncertainty"]["lining_remaining_mm"].as_f64().unwrap();
    assert!(
        (remaining - 160.0).abs() <= 2.0 * sigma + 0.5,
        "{remaining} ± {sigma} mm vs 160"
    );
    assert!(sigma < 20.0, "σ {sigma} mm");
    let change = last["resistance_change_pct"].as_f64().unwrap();
    let want = (0.799548 - 0.853394) / 0.853394 * 100.0;
    assert!((change - want).abs() < 0.5, "{change} % vs {want:.2} %");
}
