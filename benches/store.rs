//! The local database's cost per engine round (`cargo bench --bench store`):
//! what one round of a three-zone kiln writes (three zone states of the
//! demo's size, one kiln state, one alarm event into spool and history)
//! and commits, with the fsync of a real-time run and without (a simulated
//! run). The file lives in the system's temporary directory: on an SD card
//! the fsync costs more, which is why there is one per round.

use criterion::{criterion_group, criterion_main, Criterion};
use wallflux::config::StoreSettings;
use wallflux::store::{HistoryKind, Store};
use wallflux::time::Timestamp;

fn round(s: &mut Store, t: Timestamp, zone: &[u8], kiln: &[u8], event: &[u8]) {
    for z in ["north", "south", "roof"] {
        s.record(HistoryKind::Zone, Some(z), t, zone).unwrap();
    }
    s.record(HistoryKind::Kiln, None, t, kiln).unwrap();
    s.spool(t, "wallflux/p/k/events", event, false).unwrap();
    s.record(HistoryKind::Event, None, t, event).unwrap();
    s.commit().unwrap();
}

fn bench(c: &mut Criterion) {
    // Payloads of the sizes measured on the demo kiln (docs/store.md).
    let zone = vec![b'z'; 2336];
    let kiln = vec![b'k'; 665];
    let event = vec![b'e'; 380];
    for (name, power_safe) in [
        ("fsync per round", true),
        ("no fsync (simulated run)", false),
    ] {
        let dir = std::env::temp_dir().join(format!(
            "wallflux-bench-store-{}-{power_safe}",
            std::process::id()
        ));
        let _ = std::fs::remove_dir_all(&dir);
        let (mut s, _) = Store::open_with(&dir, StoreSettings::default(), power_safe).unwrap();
        let mut t = Timestamp::from_epoch_s(1.78e9);
        c.bench_function(
            &format!("store round, 3 zones + kiln + event, {name}"),
            |b| {
                b.iter(|| {
                    t = t.plus_s(60.0);
                    round(&mut s, t, &zone, &kiln, &event);
                })
            },
        );
        drop(s);
        let _ = std::fs::remove_dir_all(&dir);
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
