//! Benchmarks of the pure core's hot paths (results in BENCHMARKS.md):
//! thermocouple conversion per reading, line parsing per frame, and one
//! zone cycle (fit + balance + diagnostics) with 8 probes.

use std::hint::black_box;
use std::sync::Arc;

use criterion::{criterion_group, criterion_main, Criterion};
use wallflux::acquire::line::{encode_frame, LineParser, Unit, Value, MAX_LINE_BYTES};
use wallflux::config;
use wallflux::monitor::output::{Output, ZoneState};
use wallflux::monitor::Monitor;
use wallflux::physics::thermocouple::{compensated_c, emf_mv, temperature_c, TcType};
use wallflux::time::Timestamp;

fn thermocouple(c: &mut Criterion) {
    c.bench_function("tc K emf_mv(812.4 °C)", |b| {
        b.iter(|| emf_mv(TcType::K, black_box(812.4)))
    });
    c.bench_function("tc K temperature_c(33.275 mV)", |b| {
        b.iter(|| temperature_c(TcType::K, black_box(33.275)))
    });
    c.bench_function("tc N compensated_c(30.1 mV, cj 26 °C)", |b| {
        b.iter(|| compensated_c(TcType::N, black_box(30.1), black_box(26.0)))
    });
    c.bench_function("tc S temperature_c(12.0 mV)", |b| {
        b.iter(|| temperature_c(TcType::S, black_box(12.0)))
    });
}

fn line(c: &mut Criterion) {
    let mut out = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
    let values: Vec<(u8, Value)> = (1..=16u8)
        .map(|i| {
            (
                i,
                Value::Reading {
                    value: 1200.0 - 37.5 * f64::from(i),
                    unit: Unit::Celsius,
                },
            )
        })
        .collect();
    encode_frame(1042, &values, Some(24.6), &mut out).unwrap();
    let bytes = out.as_bytes().to_vec();
    c.bench_function("line parse 16-input frame", |b| {
        let mut p = LineParser::new();
        b.iter(|| {
            p.reset_sequence();
            let mut n = 0;
            for &byte in black_box(&bytes) {
                if let Some(Ok(f)) = p.push(byte) {
                    n += f.values.len();
                }
            }
            n
        })
    });
}

fn zone_cycle(c: &mut Criterion) {
    let mut text = String::from(
        "[site]\nplant = \"b\"\nkiln = \"k\"\n[mqtt]\nhost = \"127.0.0.1\"\n[[source]]\nname = \"s\"\nkind = \"line\"\nport = \"/dev/null\"\n\
         [[material]]\nname = \"m\"\nconductivity_w_mk = [[200.0, 1.0], [1200.0, 1.4]]\ndensity_kg_m3 = 2000.0\nspecific_heat_j_kgk = 1000.0\n",
    );
    let depths: Vec<f64> = (0..8).map(|i| 10.0 + 40.0 * f64::from(i)).collect();
    for i in 0..8 {
        text += &format!(
            "[[channel]]\nname = \"c{i}\"\nsource = \"s\"\ninput = {}\ntype = \"K\"\n",
            i + 1
        );
    }
    text += "[[zone]]\nname = \"z\"\narea_m2 = 5.0\nmodel = \"quadratic\"\ninterval_s = 1.0\nlayers = [{ material = \"m\", thickness_mm = 300 }]\nprobes = [";
    for (i, d) in depths.iter().enumerate() {
        text += &format!("{{ channel = \"c{i}\", depth_mm = {d} }},");
    }
    text += "]\n";
    let settings = Arc::new(config::parse(&text, "bench", None).unwrap());
    let channels: Vec<_> = settings.channels.ids().collect();
    let mut m = Monitor::new(settings, Timestamp::from_epoch_s(0.0));
    let mut t = 0.0;
    c.bench_function("zone cycle, 8 probes (values in + fit + report)", |b| {
        b.iter(|| {
            t += 1.0;
            let now = Timestamp::from_epoch_s(t);
            for (&ch, d) in channels.iter().zip(&depths) {
                let v = 1150.0 - 3.0 * d + 0.001 * d * d + 0.01 * t;
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
            let mut n = 0;
            m.handle_timeout(now);
            while let Some(o) = m.poll_output() {
                let Output::ZoneState(ZoneState { report: r, .. }) = o else {
                    continue;
                };
                n += r.probes.len();
            }
            n
        })
    });
}

fn wall_models(c: &mut Criterion) {
    use wallflux::physics::layered::{LayerSpec, LayeredWall};
    use wallflux::physics::material::{Material, Property};
    use wallflux::physics::profile::ProbeSample;
    use wallflux::physics::surface::{Orientation, SurfaceParams};
    use wallflux::physics::transient::{TransientEstimator, TransientLayer, TransientSettings};

    let mat = |k: Property, rho: f64| Material {
        conductivity_w_mk: k,
        density_kg_m3: rho,
        specific_heat_j_kgk: Property::Constant(1000.0),
        max_service_c: None,
    };
    let dense = mat(
        Property::table("k", &[(200.0, 1.05), (1200.0, 1.25)]).unwrap(),
        2150.0,
    );
    let ifb = mat(
        Property::table("k", &[(200.0, 0.14), (1200.0, 0.22)]).unwrap(),
        500.0,
    );
    let steel = mat(Property::Constant(50.0), 7800.0);
    let layers = [(&dense, 0.23), (&ifb, 0.115), (&steel, 0.01)];
    let samples: heapless::Vec<ProbeSample, 16> = [
        (0.04, 1010.0),
        (0.12, 820.0),
        (0.25, 480.0),
        (0.30, 260.0),
        (0.355, 95.0),
    ]
    .iter()
    .map(|&(d, t)| ProbeSample {
        depth_m: d,
        temp_c: t,
        sigma_c: 1.0,
    })
    .collect();

    let specs: Vec<LayerSpec<'_>> = layers
        .iter()
        .map(|&(m, t)| LayerSpec {
            material: m,
            thickness_m: t,
            contact_m2k_w: 0.0,
        })
        .collect();
    let wall = LayeredWall::new(&specs).unwrap();
    c.bench_function("layered fit, 3 layers with k(T), 5 probes", |b| {
        b.iter(|| wall.solve(black_box(&samples)))
    });

    // The complete uncertainty budget of that fit (readings, depths 2 mm,
    // conductivities 15 % per layer), on top of the fit.
    let w = wallflux::monitor::wall::Wall::Layered(wall.clone());
    let fit = w.solve(&samples).unwrap();
    c.bench_function("layered uncertainty budget, 3 layers, 5 probes", |b| {
        b.iter(|| w.budget(&fit, black_box(&samples), &[0.002; 5], &[0.15; 3]))
    });
    let dense_only =
        wallflux::monitor::wall::Wall::Quadratic(wallflux::physics::profile::QuadraticWall {
            thickness_m: 0.23,
            material: &dense,
        });
    let quad_samples: heapless::Vec<ProbeSample, 16> = samples[..2]
        .iter()
        .copied()
        .chain([ProbeSample {
            depth_m: 0.2,
            temp_c: 560.0,
            sigma_c: 1.0,
        }])
        .collect();
    let qfit = dense_only.solve(&quad_samples).unwrap();
    c.bench_function("quadratic uncertainty budget, 3 probes", |b| {
        b.iter(|| dense_only.budget(&qfit, black_box(&quad_samples), &[0.002; 3], &[0.15]))
    });

    let surface = SurfaceParams {
        orientation: Orientation::Vertical,
        length_m: 2.0,
        emissivity: 0.8,
        ambient_c: 25.0,
        surroundings_c: 25.0,
        wind_m_s: None,
    };
    let tl: Vec<TransientLayer<'_>> = layers
        .iter()
        .map(|&(m, t)| TransientLayer {
            material: m,
            thickness_m: t,
            contact_m2k_w: 0.0,
        })
        .collect();
    // 20 cells per layer: 61 nodes.
    let settings = TransientSettings {
        cells_per_layer: 20,
        ..TransientSettings::default()
    };
    let mut est = TransientEstimator::new(&tl, surface, settings).unwrap();
    est.step(0.0, &samples).unwrap();
    c.bench_function("transient assimilation step, 61 nodes, 5 probes", |b| {
        b.iter(|| est.step(black_box(60.0), black_box(&samples)))
    });
    c.bench_function("transient 12 h forecast, 61 nodes", |b| {
        b.iter(|| est.forecast(black_box(12.0 * 3600.0), 1300.0))
    });
}

criterion_group!(benches, thermocouple, line, zone_cycle, wall_models);
criterion_main!(benches);
