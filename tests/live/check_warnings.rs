//! `wallflux check` as a user runs it: warnings on stderr with file, line and
//! key, exit 0; `--strict` refuses them (exit 2); the summary speaks the
//! configuration's words; refusals that used to pass or panic later.

use crate::common::*;

fn check(dir: &std::path::Path, name: &str, text: &str, strict: bool) -> std::process::Output {
    let cfg = write(dir, name, text);
    let mut args = vec!["check", "--config", cfg.to_str().unwrap()];
    if strict {
        args.push("--strict");
    }
    run(&args)
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// The case: thickness and depths written in metres. Before, it
/// passed `check` silently and the daemon published MW/m².
#[test]
fn metres_for_millimetres_warns_and_strict_refuses() {
    let dir = temp_dir("check-warn");
    let cfg = one_zone_config("/dev/null", 1883, 1.5, 0.25, &[0.02, 0.1, 0.18, 0.25], 1.0);
    let o = check(&dir, "m.toml", &cfg, false);
    let err = text(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{err}");
    let line = cfg.lines().position(|l| l.starts_with("layers")).unwrap() + 1;
    assert!(
        err.contains(&format!(
            "warning: {}:{line}: zone[0].layers: the wall is 0.25 mm thick",
            dir.join("m.toml").display()
        )),
        "{err}"
    );
    assert!(text(&o.stdout).contains("configuration ok, with 1 warning"));
    let o = check(&dir, "m.toml", &cfg, true);
    let err = text(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(
        err.contains("refused with --strict")
            && err.contains(&format!("m.toml:{line}: zone[0].layers")),
        "{err}"
    );
    assert!(o.stdout.is_empty());
    // A plausible file passes --strict.
    let good = one_zone_config(
        "/dev/null",
        1883,
        1.5,
        250.0,
        &[20.0, 100.0, 180.0, 250.0],
        1.0,
    );
    let o = check(&dir, "g.toml", &good, true);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    assert!(o.stderr.is_empty(), "{}", text(&o.stderr));
}

/// The summary names signals, alarm kinds and priorities as the file writes
/// them (`millivolts`, `rate_high`, `medium`), never a Rust spelling.
#[test]
fn summary_speaks_config_words() {
    let dir = temp_dir("check-words");
    let cfg = one_zone_config(
        "/dev/null",
        1883,
        1.5,
        250.0,
        &[20.0, 100.0, 180.0, 250.0],
        1.0,
    )
    .replacen("type = \"K\"", "type = \"K\"\nsignal = \"millivolts\"", 1)
    .replace("silence_s = 5", "silence_s = 5\ncj_c = 25.0")
    .replace(
        "model = \"quadratic\"",
        "model = \"quadratic\"\nmax_ramp_c_per_h = 50",
    );
    let o = check(&dir, "w.toml", &cfg, true);
    let out = text(&o.stdout);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o.stderr));
    assert!(out.contains("type K millivolts on box input 1"), "{out}");
    assert!(
        out.contains("wall-ramp") && out.contains(" rate_high wall.hot_face_c 50 °C/h (medium)"),
        "{out}"
    );
    assert!(out.contains(" high wall.shell_c 60 °C (high)"), "{out}");
    for rust in [
        "Millivolts",
        "Celsius",
        "RateHigh",
        "Medium",
        "Some(",
        "None",
    ] {
        assert!(!out.contains(rust), "{rust} in {out}");
    }
}

/// Refused where they used to pass `check`, then panic (a duration from
/// 1e300 s) or publish nothing useful.
#[test]
fn useless_settings_exit_2_with_key_and_line() {
    let dir = temp_dir("check-refuse");
    let good = one_zone_config(
        "/dev/null",
        1883,
        1.5,
        250.0,
        &[20.0, 100.0, 180.0, 250.0],
        1.0,
    );
    for (from, to, key) in [
        ("silence_s = 5", "silence_s = 1e300", "source[0].silence_s"),
        (
            "thickness_mm = 250",
            "thickness_mm = 1e308",
            "zone[0].layers[0].thickness_mm",
        ),
        ("interval_s = 1", "interval_s = 0.01", "zone[0].interval_s"),
        (
            "area_m2 = 10.0",
            "area_m2 = 10.0\nambient_c = -300.0",
            "zone[0].ambient_c",
        ),
    ] {
        let bad = good.replacen(from, to, 1);
        assert_ne!(bad, good, "{from}");
        let o = check(&dir, "r.toml", &bad, false);
        let err = text(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{key}: {err}");
        let line = bad
            .lines()
            .position(|l| l.contains(to.lines().last().unwrap()))
            .unwrap()
            + 1;
        assert!(
            err.contains(&format!("r.toml:{line}: {key}: ")),
            "{key}: {err}"
        );
    }
}
