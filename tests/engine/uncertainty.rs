//! The complete uncertainty of a zone's numbers (GUM, JCGM 100:2008) checked
//! against a Monte Carlo of the same model (JCGM 101:2008, propagation of
//! distributions): 10⁴ draws in the test itself, each perturbing every
//! probe reading by its standard uncertainty, every probe depth by its
//! `depth_sigma_mm` and every layer's conductivity by its
//! `conductivity_uncertainty_pct` (one factor per layer), then solving the
//! wall again through the public physics API. The standard deviation of the
//! draws' hot face, shell, fluxes and heat loss must match the σ the zone
//! state publishes within 10 %.
//!
//! The readings come from the steady state of the configured wall with a
//! hot face and the shell's surface loss (`LayeredWall::solve_with_surface`),
//! rounded to 0.01 °C as a transmitter would send them.

use std::sync::Arc;

use wallflux::acquire::line::{Unit, Value};
use wallflux::config::{self, Settings};
use wallflux::monitor::channel;
use wallflux::monitor::output::{Output, ZoneState};
use wallflux::monitor::zone::ZoneReport;
use wallflux::monitor::Monitor;
use wallflux::physics::layered::{LayerSpec, LayeredWall};
use wallflux::physics::material::Material;
use wallflux::physics::profile::{heat_loss_w, ProbeSample, QuadraticWall};
use wallflux::time::Timestamp;

const T0: f64 = 1_800_000_000.0;
const DRAWS: usize = 10_000;

/// xorshift64* (Vigna, "An experimental exploration of Marsaglia's xorshift
/// generators, scrambled", 2016) and Box–Muller for normal deviates.
struct Rng(u64, Option<f64>);

impl Rng {
    fn new(seed: u64) -> Self {
        Rng(seed.max(1), None)
    }
    fn uniform(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        let r = self.0.wrapping_mul(0x2545_f491_4f6c_dd1d);
        ((r >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        if let Some(z) = self.1.take() {
            return z;
        }
        let (u1, u2) = (self.uniform(), self.uniform());
        let r = (-2.0 * u1.ln()).sqrt();
        let a = std::f64::consts::TAU * u2;
        self.1 = Some(r * a.sin());
        r * a.cos()
    }
}

fn std_dev(v: &[f64]) -> f64 {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1.0)).sqrt()
}

/// Materials in the range of their classes (test data of our own): a dense
/// lining with k rising with temperature, an insulating brick.
const MATERIALS: &str = "[[material]]\nname = \"dense\"\nconductivity_w_mk = [[200.0, 1.10], [1200.0, 1.45]]\ndensity_kg_m3 = 2150.0\nspecific_heat_j_kgk = 1000.0\nconductivity_uncertainty_pct = 15\n\
     [[material]]\nname = \"ifb\"\nconductivity_w_mk = [[200.0, 0.24], [1000.0, 0.35]]\ndensity_kg_m3 = 780.0\nspecific_heat_j_kgk = 1000.0\nconductivity_uncertainty_pct = 20\n";

/// `probes`: (depth_mm, depth_sigma_mm or None for the default).
fn config(model: &str, layers: &str, probes: &[(f64, Option<f64>)]) -> String {
    let mut s = format!(
        "[site]\nplant = \"p\"\nkiln = \"k\"\n[mqtt]\nhost = \"127.0.0.1\"\n\
         [[source]]\nname = \"box\"\nkind = \"line\"\nport = \"/dev/null\"\nsilence_s = 300\n{MATERIALS}"
    );
    for (i, _) in probes.iter().enumerate() {
        // Class 2 type K (the default tolerance), no stated uncertainty.
        s += &format!(
            "[[channel]]\nname = \"p{i}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\n",
            i + 1
        );
    }
    s += &format!(
        "[[zone]]\nname = \"z\"\narea_m2 = 4.0\nmodel = \"{model}\"\ninterval_s = 60\n\
         orientation = \"vertical\"\nheight_m = 2.0\nemissivity = 0.8\nambient_c = 25\n\
         layers = [{layers}]\nprobes = ["
    );
    for (i, (d, sd)) in probes.iter().enumerate() {
        match sd {
            Some(sd) => {
                s += &format!("{{ channel = \"p{i}\", depth_mm = {d}, depth_sigma_mm = {sd} }},")
            }
            None => s += &format!("{{ channel = \"p{i}\", depth_mm = {d} }},"),
        }
    }
    s + "]\n"
}

/// The configured zone, `z`.
fn the_zone(settings: &Settings) -> &config::Zone {
    &settings.zones[settings.zone_named("z").expect("zone z")]
}

/// The configured wall's layers as the physics sees them.
fn layer_specs(settings: &Settings) -> Vec<LayerSpec<'_>> {
    the_zone(settings)
        .layers
        .iter()
        .map(|l| LayerSpec {
            material: &settings.materials[l.material].material,
            thickness_m: l.thickness_m,
            contact_m2k_w: l.contact_m2k_w,
        })
        .collect()
}

/// The steady readings of the configured wall with a 1150 °C hot face,
/// rounded to 0.01 °C.
fn steady_readings(settings: &Settings) -> Vec<f64> {
    let z = the_zone(settings);
    let specs = layer_specs(settings);
    let wall = LayeredWall::new(&specs).unwrap();
    let sol = wall.solve_with_surface(1150.0, &z.surface).unwrap();
    z.probes
        .iter()
        .map(|p| {
            let t = wall
                .temperature_at(sol.hot_face_c, sol.flux_w_m2, p.depth_m)
                .unwrap();
            (t * 100.0).round() / 100.0
        })
        .collect()
}

/// One zone state of the real engine for `readings`.
fn zone_state(settings: &Arc<Settings>, readings: &[f64]) -> ZoneReport {
    let mut m = Monitor::new(settings.clone(), Timestamp::from_epoch_s(T0));
    let now = Timestamp::from_epoch_s(T0 + 60.0);
    for (ch, &v) in settings.channels.ids().zip(readings) {
        m.handle_value(
            ch,
            Value::Reading {
                value: v,
                unit: Unit::Celsius,
            },
            None,
            now,
        );
    }
    m.handle_timeout(now);
    std::iter::from_fn(|| m.poll_output())
        .find_map(|o| match o {
            Output::ZoneState(z) => Some(z.report),
            _ => None,
        })
        .expect("a zone state")
}

/// (hot face, shell, q(0), q(L)) of one draw, or None if the fit failed.
type Solve = dyn Fn(&[ProbeSample], &[f64]) -> Option<[f64; 4]>;

/// The Monte Carlo: σ of hot face, shell, q(0), q(L), heat loss.
fn monte_carlo(settings: &Settings, readings: &[f64], solve: &Solve, seed: u64) -> [f64; 5] {
    let z = the_zone(settings);
    let sig: Vec<f64> = z
        .probes
        .iter()
        .zip(readings)
        .map(|(p, &t)| channel::sigma_c(&settings.channels[p.channel], t))
        .collect();
    let k_rel: Vec<f64> = z
        .layers
        .iter()
        .map(|l| settings.materials[l.material].conductivity_uncertainty_pct / 100.0)
        .collect();
    let mut rng = Rng::new(seed);
    let mut outs: [Vec<f64>; 5] = Default::default();
    let mut failed = 0;
    for _ in 0..DRAWS {
        let samples: Vec<ProbeSample> = z
            .probes
            .iter()
            .zip(readings)
            .zip(&sig)
            .map(|((p, &t), &s)| ProbeSample {
                depth_m: (p.depth_m + p.depth_sigma_m * rng.normal()).clamp(0.0, z.thickness_m()),
                temp_c: t + s * rng.normal(),
                sigma_c: s,
            })
            .collect();
        let scale: Vec<f64> = k_rel.iter().map(|u| 1.0 + u * rng.normal()).collect();
        match solve(&samples, &scale) {
            Some(o) => {
                for i in 0..4 {
                    outs[i].push(o[i]);
                }
                outs[4].push(heat_loss_w(o[3], z.area_m2));
            }
            None => failed += 1,
        }
    }
    assert!(failed < DRAWS / 100, "{failed} draws failed to fit");
    [0, 1, 2, 3, 4].map(|i| std_dev(&outs[i]))
}

fn scaled(m: &Material, f: f64) -> Material {
    Material {
        conductivity_w_mk: m.conductivity_w_mk.scaled(f),
        ..m.clone()
    }
}

fn assert_matches(r: &ZoneReport, mc: [f64; 5], what: &str) {
    let u = r.uncertainty.as_ref().expect("published uncertainty");
    let published = [
        ("hot_face_c", u.hot_face_c),
        ("shell_c", u.shell_c),
        ("flux_hot_face_w_m2", u.flux_hot_face_w_m2),
        ("flux_shell_w_m2", u.flux_shell_w_m2),
        ("heat_loss_w", u.heat_loss_w),
    ];
    for ((name, p), m) in published.iter().zip(mc) {
        assert!(
            (p - m).abs() <= 0.10 * m,
            "{what}: σ of {name} published {p:.4}, Monte Carlo {m:.4}"
        );
    }
}

fn layered_solver(settings: &Settings) -> Box<Solve> {
    let specs: Vec<(Material, f64, f64)> = layer_specs(settings)
        .iter()
        .map(|s| (s.material.clone(), s.thickness_m, s.contact_m2k_w))
        .collect();
    Box::new(move |samples: &[ProbeSample], scale: &[f64]| {
        let mats: Vec<Material> = specs
            .iter()
            .zip(scale)
            .map(|((m, _, _), &f)| scaled(m, f))
            .collect();
        let layers: Vec<LayerSpec<'_>> = specs
            .iter()
            .zip(&mats)
            .map(|((_, t, c), m)| LayerSpec {
                material: m,
                thickness_m: *t,
                contact_m2k_w: *c,
            })
            .collect();
        let s = LayeredWall::new(&layers).ok()?.solve(samples).ok()?;
        Some([s.hot_face_c, s.shell_c, s.flux_w_m2, s.flux_w_m2])
    })
}

fn polynomial_solver(settings: &Settings) -> Box<Solve> {
    let m = settings.materials[the_zone(settings).layers[0].material]
        .material
        .clone();
    let l = the_zone(settings).thickness_m();
    Box::new(move |samples: &[ProbeSample], scale: &[f64]| {
        let mat = scaled(&m, scale[0]);
        let s = QuadraticWall {
            thickness_m: l,
            material: &mat,
        }
        .solve(samples)
        .ok()?;
        Some([
            s.hot_face_c,
            s.shell_c,
            s.flux_hot_face_w_m2,
            s.flux_shell_w_m2,
        ])
    })
}

/// Quadratic, four probes (degree 2): the default depth σ (2 mm) inside,
/// none at the shell thermocouple.
#[test]
fn quadratic_sigma_matches_monte_carlo() {
    let text = config(
        "quadratic",
        "{ material = \"dense\", thickness_mm = 300 }",
        &[
            (30.0, None),
            (110.0, None),
            (200.0, Some(3.0)),
            (300.0, None),
        ],
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    assert_eq!(the_zone(&settings).probes[3].depth_sigma_m, 0.0);
    assert_eq!(the_zone(&settings).probes[0].depth_sigma_m, 0.002);
    let readings = steady_readings(&settings);
    let r = zone_state(&settings, &readings);
    assert_eq!(r.fit_degree, Some(2));
    let mc = monte_carlo(&settings, &readings, &*polynomial_solver(&settings), 7);
    assert_matches(&r, mc, "quadratic, 4 probes");
}

/// Quadratic, two probes (a straight line).
#[test]
fn linear_sigma_matches_monte_carlo() {
    let text = config(
        "quadratic",
        "{ material = \"dense\", thickness_mm = 250 }",
        &[(50.0, None), (180.0, Some(1.0))],
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let readings = steady_readings(&settings);
    let r = zone_state(&settings, &readings);
    assert_eq!(r.fit_degree, Some(1));
    let mc = monte_carlo(&settings, &readings, &*polynomial_solver(&settings), 11);
    assert_matches(&r, mc, "linear, 2 probes");
}

/// Layered: a dense lining and an insulating brick, five probes.
#[test]
fn layered_sigma_matches_monte_carlo() {
    let text = config(
        "layered",
        "{ material = \"dense\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }",
        &[
            (40.0, None),
            (120.0, None),
            (200.0, None),
            (290.0, Some(2.5)),
            (345.0, None),
        ],
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let readings = steady_readings(&settings);
    let r = zone_state(&settings, &readings);
    assert_eq!(r.model_check, Some("consistent"));
    let mc = monte_carlo(&settings, &readings, &*layered_solver(&settings), 13);
    assert_matches(&r, mc, "layered, 5 probes");
}

/// On a typical single-layer wall the conductivity dominates the flux's
/// uncertainty, and its part is exactly u_k |q|: scaling k by f scales the
/// Kirchhoff potential and so the fitted flux by f, leaving every fitted
/// temperature unchanged (module docs of physics::profile). So the hot
/// face owes nothing to k.
#[test]
fn conductivity_dominates_the_flux_of_a_typical_wall() {
    let text = config(
        "quadratic",
        "{ material = \"dense\", thickness_mm = 300 }",
        &[(30.0, None), (110.0, None), (200.0, None), (300.0, None)],
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let r = zone_state(&settings, &steady_readings(&settings));
    let u = r.uncertainty.as_ref().unwrap();
    let b = u.budget.as_ref().expect("a budget");
    let q = r.flux_shell_w_m2.unwrap();
    let shares = b.flux_shell_w_m2.unwrap();
    assert!(
        shares.conductivity_pct > 80.0,
        "conductivity share of the shell flux {:.1} %",
        shares.conductivity_pct
    );
    let sum = shares.thermocouple_pct + shares.depth_pct + shares.conductivity_pct;
    assert!((sum - 100.0).abs() < 1e-9);
    let sigma_k = u.flux_shell_w_m2 * (shares.conductivity_pct / 100.0).sqrt();
    assert!(
        (sigma_k - 0.15 * q.abs()).abs() < 1e-3 * q.abs(),
        "σ from k {sigma_k:.2} W/m², 15 % of {q:.1} W/m²"
    );
    let hot = b.hot_face_c.unwrap();
    assert!(hot.conductivity_pct < 1e-6, "{hot:?}");
    // Before, σ of the flux held the thermocouples only (0.2 % of it).
    assert!(u.flux_shell_w_m2 > 0.15 * q.abs());
}

/// The transient model on a steady wall: nothing is being stored, so the
/// conductivity's part of the hot-face flux is u_k |q| of the layer the
/// probes span (Fourier's law with the gradient pinned by the probes),
/// ρc_p has no part in it, and the budget names all four sources. (No
/// Monte Carlo here: each draw would have to re-run the filter's whole
/// history.)
#[test]
fn transient_budget_on_a_steady_wall() {
    let text = config(
        "transient",
        "{ material = \"dense\", thickness_mm = 300 }",
        &[(30.0, None), (110.0, None), (200.0, None), (300.0, None)],
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let readings = steady_readings(&settings);
    let mut m = Monitor::new(settings.clone(), Timestamp::from_epoch_s(T0));
    let mut last = None;
    for minute in 1..=180 {
        let now = Timestamp::from_epoch_s(T0 + 60.0 * minute as f64);
        for (ch, &v) in settings.channels.ids().zip(&readings) {
            m.handle_value(
                ch,
                Value::Reading {
                    value: v,
                    unit: Unit::Celsius,
                },
                None,
                now,
            );
        }
        m.handle_timeout(now);
        while let Some(o) = m.poll_output() {
            let Output::ZoneState(ZoneState { report: r, .. }) = o else {
                continue;
            };
            last = Some(r);
        }
    }
    let r = last.expect("zone states");
    let u = r.uncertainty.as_ref().expect("published uncertainty");
    let b = u.budget.as_ref().expect("a budget");
    let q0 = r.flux_hot_face_w_m2.unwrap();
    let shares = b.flux_hot_face_w_m2.unwrap();
    let sigma_k = u.flux_hot_face_w_m2 * (shares.conductivity_pct / 100.0).sqrt();
    assert!(
        (sigma_k - 0.15 * q0.abs()).abs() < 0.02 * q0.abs(),
        "σ of q(0) from k {sigma_k:.1} W/m², 15 % of {q0:.1} W/m²"
    );
    let c = shares
        .heat_capacity_pct
        .expect("the transient model names ρc_p");
    assert!(c < 1.0, "{shares:?}");
    // The filter's own σ of an unmeasured hot face is large too: both parts
    // must be there.
    assert!(shares.conductivity_pct > 20.0, "{shares:?}");
    assert!(shares.thermocouple_pct > 20.0, "{shares:?}");
    assert!(shares.depth_pct > 0.0, "{shares:?}");
    assert!(u.flux_hot_face_w_m2 > 0.15 * q0.abs());
}

/// Lining wear: the σ of `lining_remaining_mm` against a Monte Carlo of
/// the same estimate (`LayeredWall::remaining_hot_layer`), with the
/// hot-face reading drawn by its σ too. The wall: the dense lining worn
/// from 230 to 180 mm; depths are measured from the original hot face.
/// The estimate is strongly curved in the conductivities (its σ from them
/// is 15 % of the thickness): first order alone gives 28 mm against 32 mm
/// of the draws; with the GUM's second-order terms (each layer's and the
/// pair's) the published σ is 9.8 % below the Monte Carlo's 33.1 mm, just
/// inside the bar.
#[test]
fn lining_remaining_sigma_matches_monte_carlo() {
    let probes = [(100.0, None), (180.0, None), (260.0, None), (345.0, None)];
    let text = config(
        "layered",
        "{ material = \"dense\", thickness_mm = 230 }, { material = \"ifb\", thickness_mm = 115 }",
        &probes,
    )
    .replace(
        "[[zone]]",
        "[[channel]]\nname = \"hf\"\nsource = \"box\"\ninput = 9\ntype = \"K\"\n[[zone]]",
    )
    .replace(
        "model = \"layered\"",
        "model = \"layered\"\nhot_face_channel = \"hf\"",
    );
    let settings = Arc::new(config::parse(&text, "t", None).unwrap());
    let z = the_zone(&settings);
    let worn_m = 0.05;
    let specs = layer_specs(&settings);
    let mut worn = specs.clone();
    worn[0].thickness_m -= worn_m;
    let wall = LayeredWall::new(&worn).unwrap();
    let sol = wall.solve_with_surface(1150.0, &z.surface).unwrap();
    let mut readings: Vec<f64> = z
        .probes
        .iter()
        .map(|p| {
            let t = wall
                .temperature_at(sol.hot_face_c, sol.flux_w_m2, p.depth_m - worn_m)
                .unwrap();
            (t * 100.0).round() / 100.0
        })
        .collect();
    readings.push(1150.0);
    let r = zone_state(&settings, &readings);
    let got = r.lining_remaining_mm.expect("a wear estimate");
    assert!((got - 180.0).abs() < 1.0, "{got} mm");
    let published = r.uncertainty.as_ref().unwrap().lining_remaining_mm.unwrap();

    let hf_sigma = channel::sigma_c(
        &settings.channels[crate::common::channel(&settings, "hf")],
        1150.0,
    );
    let sig: Vec<f64> = z
        .probes
        .iter()
        .zip(&readings)
        .map(|(p, &t)| channel::sigma_c(&settings.channels[p.channel], t))
        .collect();
    let k_rel = [0.15, 0.20];
    let mut rng = Rng::new(17);
    let mut out = Vec::new();
    for _ in 0..DRAWS {
        let samples: Vec<ProbeSample> = z
            .probes
            .iter()
            .zip(&readings)
            .zip(&sig)
            .map(|((p, &t), &s)| ProbeSample {
                depth_m: p.depth_m + p.depth_sigma_m * rng.normal(),
                temp_c: t + s * rng.normal(),
                sigma_c: s,
            })
            .collect();
        let mats: Vec<Material> = specs
            .iter()
            .zip(k_rel)
            .map(|(s, u)| scaled(s.material, 1.0 + u * rng.normal()))
            .collect();
        let layers: Vec<LayerSpec<'_>> = specs
            .iter()
            .zip(&mats)
            .map(|(s, m)| LayerSpec {
                material: m,
                thickness_m: s.thickness_m,
                contact_m2k_w: s.contact_m2k_w,
            })
            .collect();
        let hot = wallflux::physics::layered::HotFaceReading {
            temp_c: 1150.0 + hf_sigma * rng.normal(),
            sigma_c: hf_sigma,
        };
        let fit = LayeredWall::new(&layers)
            .unwrap()
            .remaining_hot_layer(&samples, hot);
        if let Ok(w) = fit {
            out.push(w.remaining_mm);
        }
    }
    assert!(out.len() > DRAWS * 99 / 100);
    let mc = std_dev(&out);
    assert!(
        (published - mc).abs() <= 0.10 * mc,
        "σ of lining_remaining_mm published {published:.2} mm, Monte Carlo {mc:.2} mm"
    );
}
