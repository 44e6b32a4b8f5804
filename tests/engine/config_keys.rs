//! The configuration keys of the energy books and the lining baseline, as
//! `check` sees them: `[site] operation` and `[[zone]] baseline_start`
//! take their documented words and refuse others with the key and line.

use crate::common::*;

fn check(text: &str) -> (Option<i32>, String) {
    let dir = temp_dir("config-keys");
    let cfg = write(&dir, "w.toml", text);
    let o = run(&["check", "--config", cfg.to_str().unwrap()]);
    (
        o.status.code(),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

#[test]
fn operation_and_baseline_start_words() {
    let base = one_zone_config(
        "/dev/null",
        1883,
        1.5,
        250.0,
        &[20.0, 100.0, 180.0, 250.0],
        1.0,
    );
    for ok in [
        base.replace("kiln = \"k1\"", "kiln = \"k1\"\noperation = \"continuous\""),
        base.replace("kiln = \"k1\"", "kiln = \"k1\"\noperation = \"periodic\""),
        base.replace(
            "model = \"quadratic\"",
            "model = \"quadratic\"\nbaseline_start = \"command\"",
        ),
    ] {
        let (code, err) = check(&ok);
        assert_eq!(code, Some(0), "{err}");
    }
    let (code, err) = check(&base.replace("kiln = \"k1\"", "kiln = \"k1\"\noperation = \"batch\""));
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("site.operation") && err.contains("\"batch\"") && err.contains("w.toml:7:"),
        "{err}"
    );
    let (code, err) = check(&base.replace(
        "model = \"quadratic\"",
        "model = \"quadratic\"\nbaseline_start = \"later\"",
    ));
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("zone[0].baseline_start") && err.contains("first_run"),
        "{err}"
    );
}
