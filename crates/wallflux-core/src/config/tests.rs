//! Configuration: the shipped files load; every broken file is refused with
//! every problem named by key path and line.

use super::*;
use crate::physics::material::MAX_TABLE_POINTS;
use crate::protocol::modbus::{DataType, Function, WordOrder};

const EXAMPLE: &str = include_str!("../../../../config/example.toml");
const DEMO: &str = include_str!("../../../../config/demo.toml");
const EXAMPLE_MODBUS: &str = include_str!("../../../../config/example-modbus.toml");

fn problems(text: &str) -> Vec<Problem> {
    match parse(text, "t.toml", None) {
        Ok(_) => panic!("accepted a broken configuration"),
        Err(e) => e.problems,
    }
}

/// A name lookup finds its own entry or nothing: an unknown zone is
/// `None`, never zone 0 in its place.
#[test]
fn names_resolve_to_their_own_ids_or_none() {
    let d = parse(DEMO, "demo.toml", None).unwrap();
    let roof = d.zone_named("roof").unwrap();
    assert_eq!((roof.index(), d.zones[roof].name.as_str()), (2, "roof"));
    assert_eq!(d.zone_named("no-such-zone"), None);
    assert_eq!(d.zone_named(""), None);
    assert_eq!(d.channel_named("no-such-channel"), None);
    assert_eq!(d.source_named("no-such-source"), None);
    assert_eq!(d.alarm_named("no-such-alarm"), None);
    let silent = d.alarm_named("tcbox-1-silent").unwrap();
    assert_eq!(
        d.alarms[silent].target,
        AlarmTarget::Source {
            source: d.source_named("tcbox-1").unwrap()
        }
    );
}

/// An id of a larger configuration is refused by the checked lookup of a
/// smaller one.
#[test]
fn an_id_from_larger_settings_is_refused_by_get() {
    let big = parse(DEMO, "demo.toml", None).unwrap();
    let small = parse(EXAMPLE, "example.toml", None).unwrap();
    let roof = big.zone_named("roof").unwrap();
    assert_eq!(big.zones.get(roof).map(|z| z.name.as_str()), Some("roof"));
    assert!(small.zones.get(roof).is_none());
    let last_channel = big.channels.ids().next_back().unwrap();
    assert!(big.channels.len() > small.channels.len());
    assert!(small.channels.get(last_channel).is_none());
}

#[test]
fn shipped_configs_load() {
    let s = parse(EXAMPLE, "example.toml", None).unwrap();
    assert_eq!(s.zones.len(), 1);
    let north = &s.zones[s.zone_named("north-wall").unwrap()];
    assert_eq!(north.probes.len(), 4);
    assert!((north.thickness_m() - 0.25).abs() < 1e-12);
    assert!((north.probes[1].depth_m - 0.12).abs() < 1e-12);
    assert_eq!(s.topic_root(), "wallflux/example-plant/kiln-3");
    assert_eq!(s.state_dir, std::path::PathBuf::from("/var/lib/wallflux"));
    let d = parse(DEMO, "demo.toml", Some("/run/x:/run/y")).unwrap();
    assert_eq!(d.zones.len(), 3);
    assert_eq!(d.state_dir, std::path::PathBuf::from("/run/x"));
    assert_eq!(
        d.source_named("tcbox-1")
            .and_then(|s| d.channel_for(s, 9))
            .map(|c| d.channels[c].name.as_str()),
        Some("door-30")
    );
    let door_30 = d.channel_named("door-30").unwrap();
    assert_eq!(door_30.index(), 5);
    assert_eq!(d.channels[door_30].signal, Signal::Millivolts);
}

#[test]
fn unknown_key_names_its_line() {
    let text = EXAMPLE.replace("keep_alive_s = 30", "keep_alive_s = 30\nkeepalive = 5");
    let p = problems(&text);
    assert_eq!(p.len(), 1);
    let line = text
        .lines()
        .position(|l| l.starts_with("keepalive"))
        .unwrap()
        + 1;
    assert_eq!(p[0].line, Some(line));
    assert!(p[0].message.contains("keepalive"), "{}", p[0].message);
}

#[test]
fn every_problem_is_reported_with_path_and_line() {
    let text = EXAMPLE
        .replace(
            "source = \"box-a\"\ninput = 2",
            "source = \"box-b\"\ninput = 2",
        )
        .replace(
            "type = \"K\"\ntolerance = \"iec-class-2\"",
            "type = \"Q\"\ntolerance = \"iec-class-2\"",
        )
        .replace("emissivity = 0.8 ", "emissivity = 1.3 ")
        .replace(
            "{ channel = \"w1-200\", depth_mm = 200 }",
            "{ channel = \"w1-200\", depth_mm = 400 }",
        )
        .replace("interval_s = 10 ", "interval_s = 0 ")
        .replace(
            "material = \"castable-a\", thickness_mm",
            "material = \"castable-b\", thickness_mm",
        );
    let p = problems(&text);
    let find = |path: &str| {
        p.iter()
            .find(|x| x.path == path)
            .unwrap_or_else(|| panic!("no problem at {path}: {p:#?}"))
    };
    let line_of = |needle: &str| text.lines().position(|l| l.contains(needle)).unwrap() + 1;
    assert_eq!(find("channel[1].source").line, Some(line_of("\"box-b\"")));
    assert_eq!(find("channel[3].type").line, Some(line_of("\"Q\"")));
    assert_eq!(
        find("zone[0].emissivity").line,
        Some(line_of("emissivity = 1.3"))
    );
    assert_eq!(
        find("zone[0].probes[2].depth_mm").line,
        Some(line_of("depth_mm = 400"))
    );
    assert!(find("zone[0].probes[2].depth_mm")
        .message
        .contains("250.0 mm"));
    assert_eq!(
        find("zone[0].interval_s").line,
        Some(line_of("interval_s = 0 "))
    );
    assert_eq!(
        find("zone[0].layers[0].material").line,
        Some(line_of("castable-b"))
    );
    assert_eq!(p.len(), 6, "{p:#?}");
}

#[test]
fn duplicates_and_references() {
    let text = EXAMPLE
        .replace("name = \"w1-120\"", "name = \"w1-40\"")
        .replace("input = 3", "input = 1");
    let p = problems(&text);
    assert!(
        p.iter()
            .any(|x| x.path == "channel[1].name" && x.message.contains("channel[0]")),
        "{p:#?}"
    );
    assert!(
        p.iter()
            .any(|x| x.path == "channel[2].input" && x.message.contains("channel[0]")),
        "{p:#?}"
    );
}

#[test]
fn quadratic_model_refuses_several_layers() {
    let text = EXAMPLE.replace(
        "layers = [{ material = \"castable-a\", thickness_mm = 250 }]",
        "layers = [{ material = \"castable-a\", thickness_mm = 150 }, { material = \"castable-a\", thickness_mm = 100 }]",
    );
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].path, "zone[0].model");
}

#[test]
fn bad_values_are_refused() {
    for (from, to, path) in [
        ("port = 1883", "port = 70000", "mqtt.port"),
        ("baud = 115200", "baud = 12", "source[0].baud"),
        ("input = 4", "input = 65", "channel[3].input"),
        ("area_m2 = 12.0", "area_m2 = -1.0", "zone[0].area_m2"),
        (
            "density_kg_m3 = 2200.0",
            "density_kg_m3 = 0.0",
            "material[0].density_kg_m3",
        ),
        (
            "[[200.0, 1.05], [600.0, 1.10]",
            "[[600.0, 1.05], [200.0, 1.10]",
            "material[0].conductivity_w_mk",
        ),
        (
            "tolerance = \"iec-class-1\"",
            "tolerance = \"class-a\"",
            "channel[0].tolerance",
        ),
        (
            "model = \"quadratic\"",
            "model = \"cubic\"",
            "zone[0].model",
        ),
        (
            "name = \"north-wall\"",
            "name = \"north wall\"",
            "zone[0].name",
        ),
        (
            "topic_root = \"wallflux\"",
            "topic_root = \"wall/#\"",
            "mqtt.topic_root",
        ),
        (
            "topic_root = \"wallflux\"",
            "topic_root = \"plant/$SYS\"",
            "mqtt.topic_root",
        ),
        (
            "topic_root = \"wallflux\"",
            "topic_root = \"a//b\"",
            "mqtt.topic_root",
        ),
    ] {
        assert!(EXAMPLE.contains(from), "{from}");
        let p = problems(&EXAMPLE.replacen(from, to, 1));
        assert!(
            p.iter().any(|x| x.path == path && x.line.is_some()),
            "{from} → {to}: {p:#?}"
        );
    }
}

/// Every name that becomes an MQTT topic level (plant, kiln, zone,
/// channel, alarm) is refused when a broker would read it otherwise: a
/// wildcard (`+`, `#`), a level separator, NUL, a leading `$` (the
/// broker's own topics) or nothing at all; so is a `topic_root` with NUL or
/// empty. Each with its key path and line.
#[test]
fn names_in_topics_cannot_break_a_topic() {
    let names = [
        ("plant = \"example-plant\"", "plant", "site.plant"),
        ("kiln = \"kiln-3\"", "kiln", "site.kiln"),
        ("name = \"north-wall\"", "name", "zone[0].name"),
        ("name = \"w1-40\"", "name", "channel[0].name"),
        ("name = \"north-wall-loss-high\"", "name", "alarm[0].name"),
    ];
    // As written in TOML: `\u0000` is the escape of NUL.
    let bad = ["a+b", "a#b", "a/b", "a\\u0000b", "$SYS", "", "+", "#"];
    for (from, key, path) in names {
        assert!(EXAMPLE.contains(from), "{from}");
        for value in bad {
            let text = EXAMPLE.replacen(from, &format!("{key} = \"{value}\""), 1);
            let p = problems(&text);
            assert!(
                p.iter().any(|x| x.path == path
                    && x.line.is_some()
                    && x.message.contains("names appear in MQTT topics")),
                "{path} = {value:?}: {p:#?}"
            );
        }
    }
    for value in ["", "wall\\u0000flux", "$share/x", "a/+/b"] {
        let text = EXAMPLE.replacen(
            "topic_root = \"wallflux\"",
            &format!("topic_root = \"{value}\""),
            1,
        );
        let p = problems(&text);
        assert!(
            p.iter()
                .any(|x| x.path == "mqtt.topic_root" && x.line.is_some()),
            "topic_root = {value:?}: {p:#?}"
        );
    }
    // What the shipped files name is a valid topic level, the built-in
    // alarms' names (made of configured names) too.
    let level_ok =
        |n: &str| !n.is_empty() && !n.starts_with('$') && !n.contains(['+', '#', '/', '\0']);
    for (text, file) in [(EXAMPLE, "example.toml"), (DEMO, "demo.toml")] {
        let s = parse(text, file, None).unwrap();
        let levels = [s.site.plant.as_str(), s.site.kiln.as_str()]
            .into_iter()
            .chain(s.zones.iter().map(|z| z.name.as_str()))
            .chain(s.channels.iter().map(|c| c.name.as_str()))
            .chain(s.alarms.iter().map(|a| a.name.as_str()));
        for n in levels {
            assert!(level_ok(n), "{file}: {n:?}");
        }
    }
}

#[test]
fn not_toml_is_an_error_with_a_line() {
    let p = problems("[site]\nplant = \"a\"\nkiln = \n");
    assert_eq!(p.len(), 1);
    assert_eq!(p[0].line, Some(3));
    let p = problems("");
    assert_eq!(p.len(), 1);
    assert!(p[0].message.contains("site"), "{}", p[0].message);
}

#[test]
fn alarms_are_validated_and_built_in_ones_tuned() {
    let s = parse(DEMO, "demo.toml", None).unwrap();
    let names: Vec<&str> = s.alarms.iter().map(|a| a.name.as_str()).collect();
    for n in [
        "side-wall-shell-touch",
        "side-wall-interface-0-service",
        "door-30-fault",
        "tcbox-1-silent",
    ] {
        assert!(names.contains(&n), "{n} missing from {names:?}");
    }
    let iface = s
        .alarms
        .iter()
        .find(|a| a.name == "side-wall-interface-0-service")
        .unwrap();
    assert_eq!(
        iface.spec.setpoint, 1430.0,
        "the insulating brick's max_service_c"
    );
    // Tune one, disable one, add one; refuse bad ones with their keys.
    let text = format!(
        "{DEMO}\n[[alarm]]\nname = \"roof-shell-touch\"\nsetpoint = 70.0\n\
         [[alarm]]\nname = \"door-30-fault\"\nenabled = false\n\
         [[alarm]]\nname = \"roof-hot\"\nzone = \"roof\"\nquantity = \"hot_face_c\"\nkind = \"high\"\nsetpoint = 1300.0\npriority = \"critical\"\n"
    );
    let s = parse(&text, "t", None).unwrap();
    assert_eq!(
        s.alarms
            .iter()
            .find(|a| a.name == "roof-shell-touch")
            .unwrap()
            .spec
            .setpoint,
        70.0
    );
    assert!(!s.alarms.iter().any(|a| a.name == "door-30-fault"));
    assert!(s.alarms.iter().any(|a| a.name == "roof-hot" && !a.builtin));
    for (bad, path) in [
        ("name = \"x\"\nzone = \"door\"\nquantity = \"interface_c[0]\"\nkind = \"high\"\nsetpoint = 1.0", "alarm[0].quantity"),
        ("name = \"x\"\nzone = \"side-wall\"\nquantity = \"interface_c[4]\"\nkind = \"high\"\nsetpoint = 1.0", "alarm[0].quantity"),
        ("name = \"x\"\nzone = \"nowhere\"\nquantity = \"shell_c\"\nkind = \"high\"\nsetpoint = 1.0", "alarm[0].zone"),
        ("name = \"x\"\nzone = \"door\"\nquantity = \"shell_c\"\nkind = \"hot\"\nsetpoint = 1.0", "alarm[0].kind"),
        ("name = \"x\"\nzone = \"door\"\nquantity = \"shell_c\"\nkind = \"high\"", "alarm[0].setpoint"),
        ("name = \"x\"\nzone = \"door\"\nquantity = \"shell_c\"\nkind = \"high\"\nsetpoint = 1.0\non_delay_s = -5.0", "alarm[0].on_delay_s"),
        ("name = \"roof-shell-touch\"\nzone = \"roof\"", "alarm[0].zone"),
        ("name = \"x\"\nzone = \"door\"\nquantity = \"heat_loss_w\"\nkind = \"deviation\"\nsetpoint = 20.0", "alarm[0].baseline"),
    ] {
        let p = problems(&format!("{DEMO}\n[[alarm]]\n{bad}\n"));
        assert!(p.iter().any(|x| x.path == path && x.line.is_some()), "{bad}: {p:#?}");
    }
}

/// The shipped material classes load, with their published values
/// (config/materials.toml: VDI Heat Atlas via `ht.insulation`; EN 1993-1-2
/// for steel, k = 54 − 0.0333 θ: 47.34 W/mK at 200 °C).
#[test]
fn shipped_materials_load() {
    let materials = include_str!("../../../../config/materials.toml");
    let text = format!("{EXAMPLE}\n{materials}");
    let s = parse(&text, "t", None).unwrap();
    let m = |n: &str| {
        &s.materials
            .iter()
            .find(|m| m.name.as_str() == n)
            .unwrap()
            .material
    };
    assert_eq!(s.materials.len(), 8);
    assert!((m("dense-fireclay").conductivity_w_mk.at(800.0) - 1.135).abs() < 1e-9);
    assert!((m("insulating-firebrick-1260").conductivity_w_mk.at(400.0) - 0.14).abs() < 1e-12);
    let steel = &m("mild-steel").conductivity_w_mk;
    assert!(
        (steel.at(200.0) - (54.0 - 0.0333 * 200.0)).abs() < 1e-9,
        "{}",
        steel.at(200.0)
    );
    assert!(
        (steel.at(555.5) - (54.0 - 0.0333 * 555.5)).abs() < 1e-9,
        "linear: the table is exact"
    );
    let steel = s
        .materials
        .iter()
        .find(|m| m.name.as_str() == "mild-steel")
        .unwrap();
    assert_eq!(steel.emissivity, Some(0.8));
    // A polynomial with an unknown key or an empty range is refused.
    let bad = text.replace("from_c = 20.0, to_c = 800.0", "from_c = 800.0, to_c = 20.0");
    assert!(problems(&bad)
        .iter()
        .any(|p| p.path.ends_with("conductivity_w_mk")));
    let bad = text.replace("from_c = 20.0, to_c = 800.0", "from = 20.0, to_c = 800.0");
    assert!(!problems(&bad).is_empty());
}

/// The uncertainty keys: defaults where absent (0 at the faces), and a
/// negative, absurd or non-finite value refused with its key and line.
#[test]
fn uncertainty_keys_default_and_refuse_the_absurd() {
    // The example without its uncertainty keys takes the defaults.
    let plain = EXAMPLE
        .replace("conductivity_uncertainty_pct = 15\n", "")
        .replace("heat_capacity_uncertainty_pct = 10\n", "")
        .replace(", depth_sigma_mm = 2 }", " }");
    assert!(!plain.contains("uncertainty_pct =") && !plain.contains("depth_sigma_mm ="));
    let s = parse(&plain, "example.toml", None).unwrap();
    let m = &s.materials[0];
    assert_eq!(
        m.conductivity_uncertainty_pct,
        DEFAULT_CONDUCTIVITY_UNCERTAINTY_PCT
    );
    assert_eq!(
        m.heat_capacity_uncertainty_pct,
        DEFAULT_HEAT_CAPACITY_UNCERTAINTY_PCT
    );
    let z = &s.zones[s.zone_named("north-wall").unwrap()];
    assert!((z.probes[0].depth_sigma_m - DEFAULT_DEPTH_SIGMA_MM / 1000.0).abs() < 1e-12);
    // The last probe sits at the shell (250 mm of a 250 mm wall).
    assert_eq!(z.probes[3].depth_sigma_m, 0.0);

    let text = EXAMPLE
        .replace(
            "conductivity_uncertainty_pct = 15",
            "conductivity_uncertainty_pct = -5",
        )
        .replace(
            "heat_capacity_uncertainty_pct = 10",
            "heat_capacity_uncertainty_pct = 250",
        )
        .replace("depth_sigma_mm = 2 }", "depth_sigma_mm = 80 }")
        .replace(
            "{ channel = \"w1-120\", depth_mm = 120 }",
            "{ channel = \"w1-120\", depth_mm = 120, depth_sigma_mm = nan }",
        );
    let p = problems(&text);
    let line_of = |needle: &str| text.lines().position(|l| l.contains(needle)).unwrap() + 1;
    for (path, needle, words) in [
        (
            "material[0].conductivity_uncertainty_pct",
            "conductivity_uncertainty_pct = -5",
            "-5",
        ),
        (
            "material[0].heat_capacity_uncertainty_pct",
            "heat_capacity_uncertainty_pct = 250",
            "250",
        ),
        (
            "zone[0].probes[0].depth_sigma_mm",
            "depth_sigma_mm = 80",
            "80",
        ),
        (
            "zone[0].probes[1].depth_sigma_mm",
            "depth_sigma_mm = nan",
            "NaN",
        ),
    ] {
        let found = p.iter().find(|q| q.path == path);
        let q = found.unwrap_or_else(|| panic!("{path} not reported: {p:?}"));
        assert_eq!(q.line, Some(line_of(needle)), "{q:?}");
        assert!(q.message.contains(words), "{q:?}");
    }
    assert_eq!(p.len(), 4, "{p:?}");
}

#[test]
fn every_unknown_key_is_reported_in_one_run() {
    let edits = [
        (
            "keep_alive_s = 30",
            "keep_alive = 30",
            "mqtt.keep_alive",
            "keep_alive_s",
        ),
        (
            "baud = 115200",
            "baud_rate = 115200",
            "source[0].baud_rate",
            "baud",
        ),
        (
            "tolerance = \"iec-class-1\"",
            "tolerence = \"iec-class-1\"",
            "channel[0].tolerence",
            "tolerance",
        ),
        (
            "max_service_c = 1500.0",
            "max_service = 1500.0",
            "material[0].max_service",
            "max_service_c",
        ),
        (
            "height_m = 3.0",
            "hieght_m = 3.0",
            "zone[0].hieght_m",
            "height_m",
        ),
        (
            "{ channel = \"w1-120\", depth_mm = 120 }",
            "{ channel = \"w1-120\", dpeth_mm = 5, depth_mm = 120 }",
            "zone[0].probes[1].dpeth_mm",
            "depth_mm",
        ),
    ];
    let mut text = EXAMPLE.to_string();
    for (from, to, _, _) in edits {
        assert!(text.contains(from), "{from}");
        text = text.replacen(from, to, 1);
    }
    let p = problems(&text);
    assert_eq!(p.len(), edits.len(), "{p:#?}");
    for (_, to, path, meant) in edits {
        let x = p
            .iter()
            .find(|x| x.path == path)
            .unwrap_or_else(|| panic!("no problem at {path}: {p:#?}"));
        let line = text.lines().position(|l| l.contains(to)).unwrap() + 1;
        assert_eq!(x.line, Some(line), "{path}");
        assert!(
            x.message.contains(&format!("did you mean `{meant}`?")),
            "{path}: {}",
            x.message
        );
    }
    // Unknown keys come with the value problems of the same file.
    let p = problems(&text.replacen("port = 1883", "port = 70000", 1));
    assert_eq!(p.len(), edits.len() + 1, "{p:#?}");
    assert!(p.iter().any(|x| x.path == "mqtt.port"), "{p:#?}");
    // A misspelt required key: the unknown key and the missing one.
    let p = problems(&EXAMPLE.replacen("area_m2 = 12.0", "area_m = 12.0", 1));
    assert!(
        p.iter()
            .any(|x| x.path == "zone[0].area_m" && x.message.contains("did you mean `area_m2`?")),
        "{p:#?}"
    );
    assert!(p.iter().any(|x| x.message.contains("area_m2")), "{p:#?}");
    // An unknown table, and a key of a polynomial.
    let p = problems(&format!("{EXAMPLE}\n[zones]\nname = \"x\"\n"));
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].path, "zones");
    assert!(p[0].message.contains("`zone`"), "{}", p[0].message);
}

#[test]
fn a_bad_model_name_is_one_problem() {
    let text = EXAMPLE.replace(
        "layers = [{ material = \"castable-a\", thickness_mm = 250 }]",
        "layers = [{ material = \"castable-a\", thickness_mm = 150 }, { material = \"castable-a\", thickness_mm = 100 }]",
    ).replace("model = \"quadratic\"", "model = \"layerd\"");
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].path, "zone[0].model");
    assert!(p[0].message.contains("\"layerd\""), "{}", p[0].message);
    // With a fallback too: still the one problem.
    let p = problems(&text.replace(
        "model = \"layerd\"",
        "model = \"layerd\"\nfallback = \"transient\"",
    ));
    assert_eq!(p.len(), 1, "{p:#?}");
}

fn warnings(text: &str) -> Vec<Problem> {
    match parse(text, "t.toml", None) {
        Ok(s) => s.warnings,
        Err(e) => panic!("refused: {e}"),
    }
}

fn line_in(text: &str, needle: &str) -> Option<usize> {
    text.lines().position(|l| l.contains(needle)).map(|l| l + 1)
}

#[test]
fn shipped_configs_have_no_warnings() {
    let materials = include_str!("../../../../config/materials.toml");
    for text in [EXAMPLE, DEMO, &format!("{EXAMPLE}\n{materials}")] {
        assert_eq!(warnings(text), vec![]);
    }
}

/// Implausible but usable: accepted, with one warning naming the key and
/// its line.
#[test]
fn implausible_settings_warn_with_key_and_line() {
    let metres = EXAMPLE
        .replace("thickness_mm = 250 }", "thickness_mm = 0.25 }")
        .replace("depth_mm = 40,", "depth_mm = 0.04,")
        .replace("depth_mm = 120 }", "depth_mm = 0.12 }")
        .replace("depth_mm = 200 }", "depth_mm = 0.2 }")
        .replace("depth_mm = 250 }", "depth_mm = 0.25 }");
    let thick = EXAMPLE.replace("thickness_mm = 250 }", "thickness_mm = 2500 }");
    let k_high = EXAMPLE.replace("[600.0, 1.10]", "[600.0, 110.0]");
    let k_low = EXAMPLE.replace(
        "conductivity_w_mk = [[200.0, 1.05], [600.0, 1.10], [1000.0, 1.18]]",
        "conductivity_w_mk = 0.004",
    );
    let k_poly = EXAMPLE.replace(
        "conductivity_w_mk = [[200.0, 1.05], [600.0, 1.10], [1000.0, 1.18]]",
        "conductivity_w_mk = { polynomial = [1.0, 0.1], from_c = 20.0, to_c = 1000.0 }",
    );
    let mv = EXAMPLE.replacen("signal = \"celsius\"", "signal = \"millivolts\"", 1);
    let touch = EXAMPLE.replace("shell_touch_c = 60", "shell_touch_c = 85");
    let tuned =
        format!("{EXAMPLE}\n[[alarm]]\nname = \"north-wall-shell-touch\"\nsetpoint = 90.0\n");
    let cases: [(&str, &str, &str, &str); 8] = [
        (&metres, "zone[0].layers", "layers = [", "0.25 mm"),
        (&thick, "zone[0].layers", "layers = [", "2500 mm"),
        (
            &k_high,
            "material[0].conductivity_w_mk",
            "conductivity_w_mk",
            "110 W/(m·K)",
        ),
        (
            &k_low,
            "material[0].conductivity_w_mk",
            "conductivity_w_mk",
            "0.004 W/(m·K)",
        ),
        // 1 + 0.1·1000 = 101 W/(m·K) at the top of its range.
        (
            &k_poly,
            "material[0].conductivity_w_mk",
            "conductivity_w_mk",
            "101 W/(m·K)",
        ),
        (
            &mv,
            "channel[0].signal",
            "signal = \"millivolts\"",
            "cj_channel",
        ),
        (
            &touch,
            "alarm_defaults.shell_touch_c",
            "shell_touch_c = 85",
            "85 °C",
        ),
        (&tuned, "alarm[1].setpoint", "setpoint = 90.0", "90 °C"),
    ];
    for (text, path, at, words) in cases {
        let w = warnings(text);
        assert_eq!(w.len(), 1, "{path}: {w:#?}");
        assert_eq!(w[0].path, path);
        assert_eq!(w[0].line, line_in(text, at), "{path}");
        assert!(w[0].message.contains(words), "{path}: {}", w[0].message);
    }
    // The limits themselves are plausible.
    for text in [
        EXAMPLE.replace("shell_touch_c = 60", "shell_touch_c = 70"),
        EXAMPLE.replace("thickness_mm = 250 }", "thickness_mm = 2000 }"),
        EXAMPLE.replace("[600.0, 1.10]", "[600.0, 70.0]"),
        // A millivolt channel with a fixed cold junction, or a terminal sensor.
        mv.replace("# cj_c = 25.0 ", "cj_c = 25.0 "),
    ] {
        assert_eq!(warnings(&text), vec![]);
    }
}

/// Settings that can never give a number are refused, with key and line.
#[test]
fn useless_settings_are_refused() {
    let one_depth = EXAMPLE
        .replace("depth_mm = 40,", "depth_mm = 120,")
        .replace("depth_mm = 200 }", "depth_mm = 120 }")
        .replace("depth_mm = 250 }", "depth_mm = 120 }");
    let cases = [
        (one_depth, "zone[0].probes", "probes = [", "120 mm"),
        (
            EXAMPLE.replace("interval_s = 10 ", "interval_s = 0.05 "),
            "zone[0].interval_s",
            "interval_s = 0.05",
            "0.1 to 86400",
        ),
        (
            EXAMPLE.replace("interval_s = 10 ", "interval_s = 90000 "),
            "zone[0].interval_s",
            "interval_s = 90000",
            "0.1 to 86400",
        ),
        (
            EXAMPLE.replace("thickness_mm = 250 }", "thickness_mm = 1e308 }"),
            "zone[0].layers[0].thickness_mm",
            "thickness_mm = 1e308",
            "1e308",
        ),
        (
            EXAMPLE.replace("ambient_c = 25", "ambient_c = -300"),
            "zone[0].ambient_c",
            "ambient_c = -300",
            "absolute zero",
        ),
        (
            EXAMPLE.replace("silence_s = 10 ", "silence_s = 1e300 "),
            "source[0].silence_s",
            "silence_s = 1e300",
            "1e300",
        ),
        (
            EXAMPLE.replace("on_delay_s = 600", "on_delay_s = 1e300"),
            "alarm[0].on_delay_s",
            "on_delay_s = 1e300",
            "one week",
        ),
        (
            EXAMPLE.replace("rate_window_s = 600 ", "rate_window_s = 1e300 "),
            "zone[0].rate_window_s",
            "rate_window_s = 1e300",
            "1e300",
        ),
        (
            EXAMPLE.replace("area_m2 = 12.0", "area_m2 = 1e308"),
            "zone[0].area_m2",
            "area_m2 = 1e308",
            "1e308",
        ),
    ];
    for (text, path, at, words) in cases {
        assert_ne!(text, EXAMPLE, "{path}: the edit did not apply");
        let p = problems(&text);
        assert_eq!(p.len(), 1, "{path}: {p:#?}");
        assert_eq!(p[0].path, path);
        assert_eq!(p[0].line, line_in(&text, at), "{path}");
        assert!(p[0].message.contains(words), "{path}: {}", p[0].message);
    }
}

#[test]
fn a_misspelt_word_is_refused_listing_the_words_of_its_table() {
    // Each key's refusal lists its enum's words in the config's spelling,
    // from the one table that also parses and prints them.
    let cases = [
        (
            "kind = \"line\"",
            "kind = \"serial\"",
            "source[0].kind",
            "line or modbus-rtu",
        ),
        (
            "signal = \"celsius\"",
            "signal = \"Celsius\"",
            "channel[0].signal",
            "celsius or millivolts",
        ),
        (
            "tolerance = \"iec-class-1\"\n",
            "tolerance = \"class1\"\n",
            "channel[0].tolerance",
            "iec-class-1, iec-class-2, iec-class-3, astm-standard or astm-special",
        ),
        (
            "model = \"quadratic\"",
            "model = \"parabolic\"",
            "zone[0].model",
            "quadratic, layered or transient",
        ),
        (
            "orientation = \"vertical\"",
            "orientation = \"wall\"",
            "zone[0].orientation",
            "vertical, roof or floor",
        ),
        (
            "kind = \"high\"",
            "kind = \"RateHigh\"",
            "alarm[0].kind",
            "high, low, rate_high, deviation or diagnostic",
        ),
        (
            "priority = \"low\"",
            "priority = \"urgent\"",
            "alarm[0].priority",
            "critical, high, medium or low",
        ),
    ];
    for (good, bad, path, words) in cases {
        assert!(EXAMPLE.contains(good), "{good}");
        let p = problems(&EXAMPLE.replacen(good, bad, 1));
        let hit = p.iter().find(|p| p.path == path);
        let Some(hit) = hit else {
            panic!("{bad}: no problem at {path}: {p:?}")
        };
        let given = bad.split('"').nth(1).unwrap();
        assert!(
            hit.message.starts_with(&format!("{given:?} is not "))
                && hit.message.ends_with(&format!("; use {words}")),
            "{bad}: {}",
            hit.message
        );
    }
}

/// The problems of `text` at `path`, which must include one whose message
/// contains `words`.
fn refused_naming(text: &str, path: &str, words: &str) {
    let p = problems(text);
    assert!(
        p.iter()
            .any(|x| x.path == path && x.line.is_some() && x.message.contains(words)),
        "{path} should name {words:?}: {p:#?}"
    );
}

/// EXAMPLE with `n` probes in its zone, each on its own channel of
/// `box-a` (inputs 1..=n), spread through the wall.
fn with_probes(n: usize) -> String {
    let mut text = EXAMPLE.to_string();
    for input in 5..=n {
        text.push_str(&format!(
            "\n[[channel]]\nname = \"x{input}\"\nsource = \"box-a\"\ninput = {input}\ntype = \"K\"\ntolerance = \"iec-class-1\"\n"
        ));
    }
    let names: Vec<String> = ["w1-40", "w1-120", "w1-200", "w1-shell"]
        .iter()
        .map(|s| s.to_string())
        .chain((5..=n).map(|i| format!("x{i}")))
        .take(n)
        .collect();
    let probes: Vec<String> = names
        .iter()
        .enumerate()
        .map(|(i, c)| format!("{{ channel = \"{c}\", depth_mm = {} }}", 250 * i / (n - 1)))
        .collect();
    let start = text.find("probes = [\n").expect("the example's probes");
    let end = start + text[start..].find("\n]\n").expect("their end") + 3;
    text.replace_range(start..end, &format!("probes = [{}]\n", probes.join(", ")));
    text
}

#[test]
fn the_probe_generator_makes_a_valid_zone() {
    let s = parse(&with_probes(MAX_PROBES), "t.toml", None).unwrap();
    let z = s.zone_named("north-wall").unwrap();
    assert_eq!(s.zones[z].probes.len(), MAX_PROBES);
}

#[test]
fn more_probes_than_a_zone_holds_are_refused_with_the_limit() {
    // Also the limit of an alarm's dependencies: an alarm on a quantity
    // of the whole zone depends on every probe's channel.
    refused_naming(
        &with_probes(MAX_PROBES + 1),
        "zone[0].probes",
        "at most 16 probes per zone",
    );
}

#[test]
fn more_layers_than_a_wall_holds_are_refused_with_the_limit() {
    let nine = ["{ material = \"castable-a\", thickness_mm = 25 }"; MAX_LAYERS + 1];
    let text = EXAMPLE
        .replace("model = \"quadratic\"", "model = \"layered\"")
        .replace(
            "layers = [{ material = \"castable-a\", thickness_mm = 250 }]",
            &format!("layers = [{}]", nine.join(", ")),
        );
    refused_naming(&text, "zone[0].layers", "at most 8 layers");
}

#[test]
fn more_forecast_horizons_than_a_zone_state_holds_are_refused_with_the_limit() {
    let nine: Vec<String> = (1..=MAX_FORECASTS + 1).map(|h| h.to_string()).collect();
    let text = DEMO.replace(
        "forecast_h = [1, 2, 4]",
        &format!("forecast_h = [{}]", nine.join(", ")),
    );
    assert_ne!(text, DEMO);
    let p = problems(&text);
    assert!(
        p.iter()
            .any(|x| x.path.ends_with(".forecast_h") && x.message.contains("1 to 8 horizons")),
        "{p:#?}"
    );
}

#[test]
fn more_channels_than_supported_are_refused_with_the_limit() {
    let mut text = EXAMPLE.to_string();
    for i in 0..MAX_CHANNELS {
        // Sources of 64 inputs each, so only the count is wrong.
        let source = i / 64;
        if i % 64 == 0 {
            text.push_str(&format!(
                "\n[[source]]\nname = \"extra-{source}\"\nkind = \"line\"\nport = \"/dev/ttyX{source}\"\nbaud = 115200\n"
            ));
        }
        text.push_str(&format!(
            "\n[[channel]]\nname = \"c{i}\"\nsource = \"extra-{source}\"\ninput = {}\ntype = \"K\"\n",
            i % 64 + 1
        ));
    }
    let p = problems(&text);
    assert_eq!(p.len(), 1, "{p:#?}");
    assert_eq!(p[0].path, "channel");
    assert!(
        p[0].message.contains("at most 256 channels"),
        "{}",
        p[0].message
    );
}

#[test]
fn an_input_beyond_the_protocol_is_refused_with_the_limit() {
    let text = EXAMPLE.replacen("input = 4", "input = 65", 1);
    refused_naming(&text, "channel[3].input", "must be 1 to 64, got 65");
    let text = EXAMPLE.replacen("input = 4", "input = 300", 1);
    refused_naming(&text, "channel[3].input", "must be 1 to 64, got 300");
}

#[test]
fn a_longer_table_or_polynomial_than_a_property_holds_is_refused_with_the_limit() {
    let points: Vec<String> = (0..=MAX_TABLE_POINTS)
        .map(|i| format!("[{}.0, 1.1]", 100 * i))
        .collect();
    let text = EXAMPLE.replace(
        "conductivity_w_mk = [[200.0, 1.05], [600.0, 1.10], [1000.0, 1.18]]",
        &format!("conductivity_w_mk = [{}]", points.join(", ")),
    );
    refused_naming(
        &text,
        "material[0].conductivity_w_mk",
        "a table needs 1 to 16 points, got 17",
    );
    let text = EXAMPLE.replace(
        "conductivity_w_mk = [[200.0, 1.05], [600.0, 1.10], [1000.0, 1.18]]",
        "conductivity_w_mk = { polynomial = [1.0, 0.0, 0.0, 0.0, 0.0, 0.0], from_c = 0.0, to_c = 1000.0 }",
    );
    refused_naming(
        &text,
        "material[0].conductivity_w_mk",
        "1 to 5 coefficients",
    );
}

#[test]
fn a_name_longer_than_a_name_holds_is_refused_with_the_limit() {
    let long = "z".repeat(MAX_NAME + 1);
    let text = EXAMPLE.replace("name = \"north-wall\"", &format!("name = \"{long}\""));
    refused_naming(&text, "zone[0].name", "1 to 48 characters");
    let just = "z".repeat(MAX_NAME);
    let text = EXAMPLE
        .replace("name = \"north-wall\"", &format!("name = \"{just}\""))
        .replace("zone = \"north-wall\"", &format!("zone = \"{just}\""));
    let s = parse(&text, "t.toml", None).unwrap();
    assert_eq!(
        s.zone_named(&just).map(|z| s.zones[z].name.as_str()),
        Some(&*just)
    );
}

/// `[commands]`: read as written; each bad value refused with its key.
#[test]
fn the_command_policy_is_read_and_checked() {
    use crate::monitor::command::Action;
    let d = parse(EXAMPLE, "example.toml", None).unwrap();
    assert_eq!(d.commands.enabled, Action::ALL.to_vec());
    assert!(d.commands.allowed_by.is_empty());
    assert_eq!(d.commands.max_age_s, DEFAULT_COMMAND_AGE_S);
    let with = |section: &str| format!("{EXAMPLE}\n[commands]\n{section}\n");
    let s = parse(
        &with(
            "enabled = [\"ack\", \"shelve\"]\nallowed_by = [\"op-anna\", \"scada-1\"]\nmax_shelve_min = 120\nmax_command_age_s = 60",
        ),
        "t.toml",
        None,
    )
    .unwrap();
    assert_eq!(s.commands.enabled, vec![Action::Ack, Action::Shelve]);
    assert_eq!(s.commands.allowed_by, vec!["op-anna", "scada-1"]);
    assert_eq!(
        (s.commands.max_shelve_min, s.commands.max_age_s),
        (120.0, 60.0)
    );
    refused_naming(
        &with("enabled = [\"ack\", \"silence\"]"),
        "commands.enabled",
        "out_of_service",
    );
    refused_naming(
        &with("enabled = [\"ack\", \"ack\"]"),
        "commands.enabled",
        "listed twice",
    );
    refused_naming(
        &with("allowed_by = []"),
        "commands.allowed_by",
        "leave it out",
    );
    refused_naming(
        &with("allowed_by = [\"op\\u0007\"]"),
        "commands.allowed_by",
        "control",
    );
    refused_naming(
        &with("max_shelve_min = 2000"),
        "commands.max_shelve_min",
        "1440",
    );
    refused_naming(
        &with("max_command_age_s = 0"),
        "commands.max_command_age_s",
        "positive",
    );
    refused_naming(
        &with("max_age = 5"),
        "commands.max_age",
        "max_command_age_s",
    );
}

/// `[mqtt] username` needs a password source, and over a plaintext link
/// (no `mqtt.tls`) the explicit `allow_plaintext_credentials`.
#[test]
fn broker_credentials_are_checked() {
    let with =
        |keys: &str| EXAMPLE.replace("keep_alive_s = 30", &format!("keep_alive_s = 30\n{keys}"));
    let ok = parse(
        &with("username = \"wf-k3\"\npassword_file = \"/etc/wallflux/mqtt-password\"\nallow_plaintext_credentials = true"),
        "t.toml",
        None,
    )
    .unwrap();
    assert_eq!(
        ok.mqtt.credentials,
        Some(Credentials {
            username: "wf-k3".into(),
            password: PasswordSource::File("/etc/wallflux/mqtt-password".into()),
        })
    );
    let cred = parse(
        &with("username = \"wf-k3\"\npassword_credential = \"mqtt-password\"\nallow_plaintext_credentials = true"),
        "t.toml",
        None,
    )
    .unwrap();
    assert_eq!(
        cred.mqtt.credentials.unwrap().password,
        PasswordSource::Credential("mqtt-password".into())
    );
    assert_eq!(
        parse(EXAMPLE, "t.toml", None).unwrap().mqtt.credentials,
        None
    );
    refused_naming(
        &with("username = \"wf-k3\"\npassword_file = \"/p\""),
        "mqtt.username",
        "clear text",
    );
    // The refusal names the way out that keeps the password secret.
    refused_naming(
        &with("username = \"wf-k3\"\npassword_file = \"/p\""),
        "mqtt.username",
        "set mqtt.tls",
    );
    refused_naming(
        &with("username = \"wf-k3\"\nallow_plaintext_credentials = true"),
        "mqtt.username",
        "password_file",
    );
    refused_naming(
        &with("password_file = \"/p\""),
        "mqtt.username",
        "needs a username",
    );
    refused_naming(
        &with("username = \"u\"\npassword_file = \"/p\"\npassword_credential = \"c\"\nallow_plaintext_credentials = true"),
        "mqtt.password_credential",
        "not both",
    );
    refused_naming(
        &with(
            "username = \"u\"\npassword_credential = \"../x\"\nallow_plaintext_credentials = true",
        ),
        "mqtt.password_credential",
        "no '/'",
    );
}

/// `[mqtt.tls]` (a table or an inline table): `ca_file` required, the
/// client certificate and key only together, `server_name` defaulting to
/// `mqtt.host`, port 8883 unless given; with it a broker account needs no
/// `allow_plaintext_credentials` (and that key, given, is a warning).
#[test]
fn mqtt_tls_is_read_and_checked() {
    let with =
        |keys: &str| EXAMPLE.replace("keep_alive_s = 30", &format!("keep_alive_s = 30\n{keys}"));
    let inline = parse(
        &with("tls = { ca_file = \"/etc/wallflux/plant-ca.pem\" }"),
        "t.toml",
        None,
    )
    .unwrap();
    assert_eq!(
        inline.mqtt.tls,
        Some(TlsSettings {
            ca_file: "/etc/wallflux/plant-ca.pem".into(),
            client: None,
            server_name: "127.0.0.1".into(),
        })
    );
    // The example gives `port = 1883`, which stays: only an absent port
    // becomes the TLS port.
    assert_eq!(inline.mqtt.port, 1883);
    let no_port = EXAMPLE.replace("port = 1883\n", "");
    assert_eq!(parse(&no_port, "t.toml", None).unwrap().mqtt.port, 1883);
    let tls_no_port = no_port.replace(
        "keep_alive_s = 30",
        "keep_alive_s = 30\ntls = { ca_file = \"/ca.pem\" }",
    );
    assert_eq!(parse(&tls_no_port, "t.toml", None).unwrap().mqtt.port, 8883);

    // `[mqtt.tls]` as a table of its own, after everything else of [mqtt].
    let table = EXAMPLE.replacen(
        "\n[[source]]",
        "\n[mqtt.tls]\nca_file = \"/ca.pem\"\nclient_cert_file = \"/kiln-3.crt\"\nclient_key_file = \"/kiln-3.key\"\nserver_name = \"broker.plant.example\"\n\n[[source]]",
        1,
    );
    assert_ne!(
        table, EXAMPLE,
        "the example has a [[source]] to insert before"
    );
    let t = parse(&table, "t.toml", None).unwrap().mqtt.tls.unwrap();
    assert_eq!(
        t.client,
        Some(ClientIdentity {
            cert_file: "/kiln-3.crt".into(),
            key_file: "/kiln-3.key".into(),
        })
    );
    assert_eq!(t.server_name, "broker.plant.example");
    assert_eq!(t.ca_file, std::path::PathBuf::from("/ca.pem"));

    refused_naming(
        &with("tls = { }"),
        "mqtt.tls.ca_file",
        "plant broker has its own CA",
    );
    refused_naming(
        &with("tls = { server_name = \"broker\" }"),
        "mqtt.tls.ca_file",
        "is required",
    );
    refused_naming(
        &with("tls = { ca_file = \"\" }"),
        "mqtt.tls.ca_file",
        "empty",
    );
    refused_naming(
        &with("tls = { ca_file = \"/ca.pem\", client_cert_file = \"/c.crt\" }"),
        "mqtt.tls.client_key_file",
        "needs client_key_file",
    );
    refused_naming(
        &with("tls = { ca_file = \"/ca.pem\", client_key_file = \"/c.key\" }"),
        "mqtt.tls.client_cert_file",
        "needs client_cert_file",
    );
    for bad in [
        "*.plant.example",
        "broker name",
        "-broker",
        "10.0.0.300",
        "",
    ] {
        refused_naming(
            &with(&format!(
                "tls = {{ ca_file = \"/ca.pem\", server_name = \"{bad}\" }}"
            )),
            "mqtt.tls.server_name",
            "neither a DNS name nor an IP address",
        );
    }
    for good in [
        "broker",
        "broker.plant.example",
        "10.0.0.30",
        "fd00::30",
        "mqtt_1.plant",
    ] {
        let s = parse(
            &with(&format!(
                "tls = {{ ca_file = \"/ca.pem\", server_name = \"{good}\" }}"
            )),
            "t.toml",
            None,
        )
        .unwrap_or_else(|e| panic!("{good} refused: {e}"));
        assert_eq!(s.mqtt.tls.unwrap().server_name, good);
    }
    refused_naming(
        &EXAMPLE
            .replace("host = \"127.0.0.1\"", "host = \"kiln broker\"")
            .replace(
                "keep_alive_s = 30",
                "keep_alive_s = 30\ntls = { ca_file = \"/ca.pem\" }",
            ),
        "mqtt.host",
        "which TLS needs",
    );
    refused_naming(
        &with("tls = { ca_file = \"/ca.pem\", cafile = \"/x\" }"),
        "mqtt.tls.cafile",
        "did you mean `ca_file`?",
    );

    // A broker account over TLS: no plaintext permission needed.
    let account = parse(
        &with("username = \"wf-k3\"\npassword_file = \"/p\"\ntls = { ca_file = \"/ca.pem\" }"),
        "t.toml",
        None,
    )
    .unwrap();
    assert_eq!(account.mqtt.credentials.unwrap().username, "wf-k3");
    assert!(account.warnings.is_empty(), "{:#?}", account.warnings);
    let text = with(
        "username = \"wf-k3\"\npassword_file = \"/p\"\nallow_plaintext_credentials = true\ntls = { ca_file = \"/ca.pem\" }",
    );
    let w = warnings(&text);
    assert!(
        w.iter()
            .any(|p| p.path == "mqtt.allow_plaintext_credentials"
                && p.line == line_in(&text, "allow_plaintext_credentials")
                && p.message.contains("no effect")),
        "{w:#?}"
    );
}

/// `[mqtt] protocol`: 3.1.1 unless "5" is asked for; another word is
/// refused with the choices; `[store]` bounds are checked.
#[test]
fn the_mqtt_version_and_the_store_bounds_are_read_and_checked() {
    let with =
        |keys: &str| EXAMPLE.replace("keep_alive_s = 30", &format!("keep_alive_s = 30\n{keys}"));
    assert_eq!(
        parse(EXAMPLE, "t.toml", None).unwrap().mqtt.protocol,
        MqttProtocol::V311
    );
    assert_eq!(
        parse(&with("protocol = \"5\""), "t.toml", None)
            .unwrap()
            .mqtt
            .protocol,
        MqttProtocol::V5
    );
    let p = problems(&with("protocol = \"4\""));
    assert_eq!(p.len(), 1, "{p:?}");
    assert_eq!(p[0].path, "mqtt.protocol");
    assert!(p[0].message.contains("use 3.1.1 or 5"), "{}", p[0].message);

    let store = |keys: &str| format!("{EXAMPLE}\n[store]\n{keys}\n");
    let s = parse(&store("spool_max_mb = 8\nhistory_days = 0"), "t.toml", None).unwrap();
    assert_eq!((s.store.spool_max_mb, s.store.history_days), (8.0, 0.0));
    assert_eq!(s.store.spool_max_age_h, DEFAULT_SPOOL_MAX_AGE_H);
    for (keys, path) in [
        ("spool_max_mb = 0.001", "store.spool_max_mb"),
        ("spool_max_mb = -1", "store.spool_max_mb"),
        ("spool_max_age_h = 0", "store.spool_max_age_h"),
        ("history_days = -2", "store.history_days"),
        ("history_days = 5000", "store.history_days"),
    ] {
        let p = problems(&store(keys));
        assert!(p.iter().any(|p| p.path == path), "{keys}: {p:?}");
    }
}

/// A Modbus RTU source and its channels: read with their defaults and
/// their places as inputs; every key in the wrong place refused, naming
/// why.
#[test]
fn modbus_sources_and_channels_are_read_and_checked() {
    let base = r#"
[site]
plant = "p"
kiln = "k"

[mqtt]
host = "127.0.0.1"

[[source]]
name = "bus"
kind = "modbus-rtu"
port = "/dev/ttyUSB0"
baud = 9600
parity = "even"

[[source]]
name = "box"
kind = "line"
port = "/dev/ttyUSB1"

[[channel]]
name = "a"
source = "bus"
unit_id = 3
address = 0
scale = 0.1
type = "K"

[[channel]]
name = "b"
source = "bus"
unit_id = 4
function = "holding"
address = 2
data_type = "f32"
word_order = "low_first"
open_values = [-9999.0]
type = "K"

[[channel]]
name = "c"
source = "box"
input = 1
type = "K"

[[material]]
name = "m"
conductivity_w_mk = 1.0
density_kg_m3 = 2000.0
specific_heat_j_kgk = 1000.0

[[zone]]
name = "z"
area_m2 = 1.0
model = "quadratic"
interval_s = 10.0
layers = [{ material = "m", thickness_mm = 200.0 }]
probes = [{ channel = "a", depth_mm = 20.0 }, { channel = "b", depth_mm = 100.0 }, { channel = "c", depth_mm = 200.0 }]
"#;
    let s = parse(base, "t.toml", None).unwrap();
    let bus = &s.sources[s.source_named("bus").unwrap()];
    let b = bus.bus.as_ref().unwrap();
    assert_eq!(
        (b.parity, b.stop_bits, b.poll_ms, b.timeout_ms, b.retries),
        (Parity::Even, 1, 1000, 300, 1)
    );
    // 3.5 characters of 11 bits at 9600 baud: 4.0104 ms.
    assert_eq!(b.inter_frame_us, 4011);
    let a = &s.channels[s.channel_named("a").unwrap()];
    let pa = a.point.as_ref().unwrap();
    assert_eq!(
        (
            a.input,
            pa.unit,
            pa.function,
            pa.address,
            pa.data_type,
            pa.scale
        ),
        (1, 3, Function::Input, 0, DataType::I16, 0.1)
    );
    let bch = &s.channels[s.channel_named("b").unwrap()];
    let pb = bch.point.as_ref().unwrap();
    assert_eq!(
        (bch.input, pb.function, pb.data_type, pb.word_order),
        (2, Function::Holding, DataType::F32, WordOrder::LowFirst)
    );
    assert_eq!(pb.open_values.as_slice(), &[-9999.0]);
    assert!(s.channels[s.channel_named("c").unwrap()].point.is_none());
    assert!(s.sources[s.source_named("box").unwrap()].bus.is_none());

    for (from, to, path, words) in [
        (
            "unit_id = 3\n",
            "unit_id = 3\ninput = 4\n",
            "channel[0].input",
            "not input",
        ),
        (
            "input = 1\n",
            "input = 1\nunit_id = 2\n",
            "channel[2].unit_id",
            "line source",
        ),
        ("unit_id = 3\n", "", "channel[0].unit_id", "is missing"),
        (
            "unit_id = 3\n",
            "unit_id = 248\n",
            "channel[0].unit_id",
            "1 to 247",
        ),
        (
            "address = 0\nscale",
            "scale",
            "channel[0].address",
            "is missing",
        ),
        (
            "address = 0\nscale",
            "address = 70000\nscale",
            "channel[0].address",
            "30001 or 40001 is address 0",
        ),
        ("scale = 0.1", "scale = 0.0", "channel[0].scale", "not be 0"),
        (
            "scale = 0.1",
            "scale = 0.1\nword_order = \"low_first\"",
            "channel[0].word_order",
            "32-bit",
        ),
        (
            "data_type = \"f32\"",
            "data_type = \"f64\"",
            "channel[1].data_type",
            "i16, u16, i32, u32 or f32",
        ),
        (
            "parity = \"even\"",
            "parity = \"mark\"",
            "source[0].parity",
            "none, even or odd",
        ),
        (
            "parity = \"even\"",
            "parity = \"even\"\ninter_frame_ms = 1.0",
            "source[0].inter_frame_ms",
            "3.5-character",
        ),
        (
            "port = \"/dev/ttyUSB1\"",
            "port = \"/dev/ttyUSB1\"\npoll_ms = 100",
            "source[1].poll_ms",
            "modbus-rtu",
        ),
        (
            "address = 2\n",
            "address = 0\n",
            "channel[1].address",
            "already read",
        ),
    ] {
        assert!(base.contains(from), "{from}");
        let text = base.replacen(from, to, 1);
        let text = if from == "address = 2\n" {
            text.replacen("unit_id = 4", "unit_id = 3", 1).replacen(
                "function = \"holding\"\n",
                "",
                1,
            )
        } else {
            text
        };
        let p = problems(&text);
        assert!(
            p.iter()
                .any(|x| x.path == path && x.message.contains(words)),
            "{to}: {path} should say {words:?}: {p:#?}"
        );
    }
    // A manual's register number is a warning, not an error.
    let w = parse(
        &base.replacen("address = 0\nscale", "address = 30001\nscale", 1),
        "t.toml",
        None,
    )
    .unwrap();
    assert!(
        w.warnings
            .iter()
            .any(|x| x.path == "channel[0].address"
                && x.message.contains("register 30001 is address 0")),
        "{:?}",
        w.warnings
    );
}

/// The Modbus example loads without a warning, its two module layouts as
/// its comments say.
#[test]
fn the_modbus_example_loads_as_it_says() {
    let s = parse(EXAMPLE_MODBUS, "example-modbus.toml", None).unwrap();
    assert!(s.warnings.is_empty(), "{:?}", s.warnings);
    let points: Vec<_> = s
        .channels
        .iter()
        .map(|c| c.point.clone().unwrap())
        .collect();
    assert!(points[..4].iter().enumerate().all(|(i, p)| p.unit == 1
        && p.function == Function::Input
        && p.address == i as u16
        && p.data_type == DataType::I16
        && p.scale == 0.1
        && p.open_values.as_slice() == [32767.0]));
    assert!(points[4..].iter().enumerate().all(|(i, p)| p.unit == 2
        && p.function == Function::Holding
        && p.address == 2 * i as u16
        && p.data_type == DataType::F32
        && p.word_order == WordOrder::LowFirst));
}
