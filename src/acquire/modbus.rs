//! The Modbus RTU edge: one task per bus polls its units in turn with the
//! read requests the core plans (`protocol::modbus::plan`), checks every
//! reply with the core (`check_reply`), and hands each poll's readings to
//! the engine as one scan, the same as a line-protocol source gives.
//!
//! RTU is spoken here with the core's own frames over tokio-serial rather
//! than through a Modbus client crate, so that every reply is judged by
//! its CRC, unit, function and byte count before it is taken: a reply that
//! arrives after its timeout (the classic fault of an RTU bus, which would
//! shift every later reading by one request) is recognised as not ours and
//! dropped, and CRC errors, exceptions and late replies are counted per
//! unit. After any timeout or bad frame the edge waits out a late reply
//! (one timeout more) and throws away whatever the line still holds before
//! it sends again.
//!
//! A unit that fails every try of a request is marked silent for the poll
//! (its channels get no reading: they go stale and their fault alarms say
//! so) and, while it stays silent, is asked only every
//! [`SILENT_RETRY_POLLS`] polls, so that it costs the others at most its
//! timeouts now and then. The bus reopens after the adapter is unplugged.

use std::collections::BTreeMap;
use std::sync::atomic::Ordering;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{mpsc, watch};
use tokio_serial::SerialPortBuilderExt;
use tracing::{info, warn};

use super::serial::{wait_or_shutdown, Delivery, FromSource, SourceHealth};
use crate::app::clock::Clock;
use crate::config::{ModbusBus, Parity, Source};
use crate::ids::SourceId;
use crate::protocol::modbus::{self, Fault, Point, Request, Value, MAX_REGISTERS};
use crate::protocol::scan::{InputAddress, Reading, Scan, Unit};
use crate::time::Timestamp;
use wallflux_core::bounded::PushWithin;

/// A silent unit is asked again every this many polls.
pub const SILENT_RETRY_POLLS: u64 = 10;
const MIN_BACKOFF: Duration = Duration::from_millis(500);
const MAX_BACKOFF: Duration = Duration::from_secs(30);

/// One unit's counters, for the status.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct UnitStats {
    pub requests: u64,
    pub answers: u64,
    pub timeouts: u64,
    pub crc_errors: u64,
    /// Frames that were not the answer to the request (late replies,
    /// wrong length).
    pub bad_frames: u64,
    /// Exception replies by exception code.
    pub exceptions: BTreeMap<u8, u64>,
    pub last_answer: Option<Timestamp>,
    pub silent: bool,
}

/// Every unit's counters on one bus.
#[derive(Debug, Default)]
pub struct BusStats {
    pub units: Mutex<BTreeMap<u8, UnitStats>>,
}

impl BusStats {
    fn with(&self, unit: u8, f: impl FnOnce(&mut UnitStats)) {
        let mut u = self.units.lock().unwrap_or_else(|e| e.into_inner());
        f(u.entry(unit).or_default());
    }
}

/// What one request came to (by value: boxing the registers would
/// allocate per request).
#[allow(clippy::large_enum_variant)]
enum Outcome {
    Answer(heapless::Vec<u16, { MAX_REGISTERS as usize }>),
    Fault(Fault),
    Timeout,
}

/// Runs Modbus source `id`, reading `points` (each with the input number
/// its channel is known by and the unit its value is in), until
/// `shutdown` turns true.
#[allow(clippy::too_many_arguments)]
pub async fn run(
    id: SourceId,
    source: Source,
    points: Vec<(InputAddress, Point, Unit)>,
    tx: mpsc::Sender<FromSource>,
    health: Arc<SourceHealth>,
    stats: Arc<BusStats>,
    clock: Clock,
    mut shutdown: watch::Receiver<bool>,
) {
    let name = source.name.to_string();
    let Some(bus) = source.bus.clone() else {
        return;
    };
    let pts: Vec<Point> = points.iter().map(|(_, p, _)| p.clone()).collect();
    let plan = match modbus::plan(&pts) {
        Ok(p) => p,
        Err(e) => {
            warn!(source = %name, error = %e, "Modbus source not polled");
            return;
        }
    };
    for r in &plan {
        stats.with(r.unit, |_| {});
    }
    info!(source = %name, units = stats.units.lock().map(|u| u.len()).unwrap_or(0),
        requests = plan.len(), points = points.len(), "Modbus bus planned");
    let poll = clock.real_duration(bus.poll_ms as f64 / 1000.0);
    let mut backoff = MIN_BACKOFF;
    let mut warned_open = false;
    loop {
        if *shutdown.borrow() {
            return;
        }
        let mut port = match open(&source, &bus) {
            Ok(p) => p,
            Err(e) => {
                health.open_failures.fetch_add(1, Ordering::Relaxed);
                if !warned_open {
                    warn!(source = %name, port = %source.port, error = %e,
                        "cannot open the Modbus bus; retrying with backoff up to {}s", MAX_BACKOFF.as_secs());
                    warned_open = true;
                }
                if wait_or_shutdown(backoff, &mut shutdown).await {
                    return;
                }
                backoff = (backoff * 2).min(MAX_BACKOFF);
                continue;
            }
        };
        warned_open = false;
        backoff = MIN_BACKOFF;
        health.open.store(true, Ordering::Relaxed);
        health.opens.fetch_add(1, Ordering::Relaxed);
        info!(source = %name, port = %source.port, baud = source.baud, "Modbus bus open");
        let mut ticker = tokio::time::interval(poll);
        ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        let mut polls: u64 = 0;
        let lost = 'polling: loop {
            tokio::select! {
                _ = ticker.tick() => {}
                _ = shutdown.changed() => if *shutdown.borrow() { return; } else { continue; },
            }
            polls += 1;
            let mut scan = Scan::default();
            let mut failed_units: heapless::Vec<u8, 64> = heapless::Vec::new();
            for req in &plan {
                if failed_units.contains(&req.unit) {
                    continue;
                }
                let silent = stats
                    .units
                    .lock()
                    .map(|u| u.get(&req.unit).is_some_and(|s| s.silent))
                    .unwrap_or(false);
                let tries = if silent {
                    if !polls.is_multiple_of(SILENT_RETRY_POLLS) {
                        continue;
                    }
                    1
                } else {
                    bus.retries + 1
                };
                let mut answered = None;
                for _ in 0..tries {
                    stats.with(req.unit, |s| s.requests += 1);
                    match transact(&mut port, req, &bus).await {
                        Ok(Outcome::Answer(regs)) => {
                            answered = Some(regs);
                            break;
                        }
                        Ok(Outcome::Fault(f)) => {
                            stats.with(req.unit, |s| match f {
                                Fault::Crc => s.crc_errors += 1,
                                Fault::Exception(c) => *s.exceptions.entry(c).or_default() += 1,
                                Fault::NotOurs | Fault::WrongLength | Fault::Short => {
                                    s.bad_frames += 1
                                }
                            });
                            settle(&mut port, &bus).await;
                        }
                        Ok(Outcome::Timeout) => {
                            stats.with(req.unit, |s| s.timeouts += 1);
                            settle(&mut port, &bus).await;
                        }
                        Err(e) => break 'polling e.to_string(),
                    }
                }
                match answered {
                    Some(regs) => {
                        let now = clock.now();
                        let was_silent = silent;
                        stats.with(req.unit, |s| {
                            s.answers += 1;
                            s.last_answer = Some(now);
                            s.silent = false;
                        });
                        if was_silent {
                            info!(source = %name, unit = req.unit, "Modbus unit answering again");
                        }
                        for &(pi, offset) in &req.points {
                            let (input, point, unit) = &points[pi as usize];
                            let Some(v) = regs.get(offset as usize..).and_then(|r| point.value(r))
                            else {
                                continue;
                            };
                            let reading = match v {
                                Value::Number(x) => Reading::Measured {
                                    value: x,
                                    unit: *unit,
                                },
                                Value::Open => Reading::Open,
                                // Not a number: left out (the channel goes
                                // stale rather than read a made-up value).
                                Value::NotANumber => continue,
                            };
                            if scan
                                .readings
                                .push_within((*input, reading), "readings of a scan")
                                .is_err()
                            {
                                break;
                            }
                        }
                    }
                    None => {
                        let _ = failed_units.push_within(req.unit, "units of a bus");
                        let newly = stats
                            .units
                            .lock()
                            .map(|mut u| {
                                let s = u.entry(req.unit).or_default();
                                let newly = !s.silent;
                                s.silent = true;
                                newly
                            })
                            .unwrap_or(false);
                        if newly {
                            warn!(source = %name, unit = req.unit, tries,
                                "Modbus unit not answering: its channels get no readings; asked again every {SILENT_RETRY_POLLS} polls");
                        }
                    }
                }
            }
            // Nobody answered: an adapter pulled out may leave the port
            // open and silent rather than failing it, but its device node
            // is gone.
            if scan.readings.is_empty() && std::fs::metadata(&source.port).is_err() {
                break 'polling "the device is gone".to_string();
            }
            if !scan.readings.is_empty() {
                let msg = FromSource {
                    source: id,
                    time: clock.now(),
                    delivery: Delivery::Scan(scan),
                };
                if tx.send(msg).await.is_err() {
                    return;
                }
            }
        };
        health.open.store(false, Ordering::Relaxed);
        warn!(source = %name, port = %source.port, reason = %lost, "Modbus bus lost; reopening with backoff");
        drop(port);
        if wait_or_shutdown(backoff, &mut shutdown).await {
            return;
        }
    }
}

fn open(source: &Source, bus: &ModbusBus) -> tokio_serial::Result<tokio_serial::SerialStream> {
    let parity = match bus.parity {
        Parity::None => tokio_serial::Parity::None,
        Parity::Even => tokio_serial::Parity::Even,
        Parity::Odd => tokio_serial::Parity::Odd,
    };
    let stop = if bus.stop_bits == 2 {
        tokio_serial::StopBits::Two
    } else {
        tokio_serial::StopBits::One
    };
    tokio_serial::new(&source.port, source.baud)
        .data_bits(tokio_serial::DataBits::Eight)
        .parity(parity)
        .stop_bits(stop)
        .open_native_async()
}

/// One request and its reply. An error only when the port itself fails.
async fn transact(
    port: &mut tokio_serial::SerialStream,
    req: &Request,
    bus: &ModbusBus,
) -> std::io::Result<Outcome> {
    // The silence that separates frames, before ours.
    tokio::time::sleep(Duration::from_micros(bus.inter_frame_us as u64)).await;
    port.write_all(&req.frame()).await?;
    let mut buf = [0u8; modbus::MAX_REPLY_BYTES];
    let mut got = 0usize;
    let deadline = tokio::time::Instant::now() + Duration::from_millis(bus.timeout_ms);
    let gap = Duration::from_micros(bus.inter_frame_us as u64 * 2);
    loop {
        let want = modbus::expected_len(req, &buf[..got]).min(buf.len());
        if got >= want {
            break;
        }
        // Until the deadline for the first byte; after that, a silence of
        // a frame's end also ends it (a short or damaged frame).
        let until = if got == 0 {
            deadline
        } else {
            deadline.min(tokio::time::Instant::now() + gap.max(Duration::from_millis(20)))
        };
        match tokio::time::timeout_at(until, port.read(&mut buf[got..want])).await {
            Ok(Ok(0)) => {
                return Err(std::io::Error::new(
                    std::io::ErrorKind::UnexpectedEof,
                    "device gone (end of file)",
                ))
            }
            Ok(Ok(n)) => got += n,
            Ok(Err(e)) => return Err(e),
            Err(_) if got == 0 => return Ok(Outcome::Timeout),
            Err(_) => break,
        }
    }
    let mut regs = heapless::Vec::new();
    Ok(match modbus::check_reply(req, &buf[..got], &mut regs) {
        Ok(()) => Outcome::Answer(regs),
        Err(f) => Outcome::Fault(f),
    })
}

/// After a timeout or a bad frame: wait out a late reply (one timeout),
/// then throw away whatever the line holds, so the next request's reply
/// is the next thing read.
async fn settle(port: &mut tokio_serial::SerialStream, bus: &ModbusBus) {
    tokio::time::sleep(Duration::from_millis(bus.timeout_ms)).await;
    let mut junk = [0u8; 256];
    while let Ok(Ok(n)) = tokio::time::timeout(Duration::from_millis(5), port.read(&mut junk)).await
    {
        if n == 0 {
            break;
        }
    }
}

/// `wallflux probe-modbus`: one read, printed raw and decoded; an error
/// says what the unit did instead (no answer, an exception, a damaged
/// frame).
pub async fn probe(a: &crate::app::cli::ProbeModbusArgs) -> anyhow::Result<()> {
    use crate::protocol::modbus::{DataType, Function, WordOrder};
    use wallflux_core::words::Word;
    let parity = Parity::from_word(&a.parity).unwrap_or(Parity::None);
    let bus = ModbusBus {
        parity,
        stop_bits: a.stop_bits,
        poll_ms: 1000,
        timeout_ms: a.timeout_ms,
        retries: 0,
        inter_frame_us: modbus::inter_frame_us(a.baud),
    };
    let source = Source {
        name: "probe"
            .try_into()
            .map_err(|_| anyhow::anyhow!("a source name"))?,
        kind: crate::config::SourceKind::ModbusRtu,
        port: a.port.clone(),
        baud: a.baud,
        cj_c: None,
        cj_channel: None,
        silence_s: 10.0,
        bus: Some(bus.clone()),
    };
    let mut port = open(&source, &bus).map_err(|e| {
        let hint = if e.to_string().contains("exclusive lock") {
            " (another program, the daemon perhaps, has the port open)"
        } else {
            ""
        };
        anyhow::anyhow!("cannot open {}: {e}{hint}", a.port)
    })?;
    let function = Function::from_word(&a.function).unwrap_or(Function::Input);
    let req = Request {
        unit: a.unit,
        function,
        address: a.address,
        count: a.count,
        points: heapless::Vec::new(),
    };
    let regs = match transact(&mut port, &req, &bus).await? {
        Outcome::Answer(r) => r,
        Outcome::Timeout => anyhow::bail!(
            "unit {} did not answer within {} ms (check its address, the baud rate, parity and the A/B wiring)",
            a.unit,
            a.timeout_ms
        ),
        Outcome::Fault(Fault::Exception(c)) => anyhow::bail!(
            "unit {} answered with exception {c:02} ({})",
            a.unit,
            exception_words(c)
        ),
        Outcome::Fault(Fault::Crc) => anyhow::bail!("a damaged reply (CRC): check the wiring, termination and baud rate"),
        Outcome::Fault(f) => anyhow::bail!(
            "a reply that is not the answer ({}): another master on the bus, or a unit answering late",
            match f {
                Fault::Short => "cut short",
                Fault::WrongLength => "of the wrong length",
                _ => "from another unit or function",
            }
        ),
    };
    println!(
        "unit {} {} registers {}..{} ({} registers):",
        a.unit,
        function.name(),
        a.address,
        a.address as u32 + a.count as u32 - 1,
        a.count
    );
    println!("  address   hex      u16      i16");
    for (i, r) in regs.iter().enumerate() {
        println!(
            "  {:>7}   0x{r:04X}  {r:>6}  {:>7}",
            a.address as usize + i,
            *r as i16
        );
    }
    if let Some(dt) = a.data_type.as_deref().and_then(DataType::from_word) {
        let order = WordOrder::from_word(&a.word_order).unwrap_or(WordOrder::HighFirst);
        println!("  as {} ({}):", dt.name(), order.name());
        let step = dt.registers() as usize;
        for (i, chunk) in regs.chunks(step).enumerate() {
            match modbus::decode(chunk, dt, order) {
                Some(v) => println!(
                    "  {:>7}   {}",
                    a.address as usize + i * step,
                    match v {
                        modbus::Raw::Int(n) => n.to_string(),
                        modbus::Raw::Float(f) => f.to_string(),
                    }
                ),
                None => println!(
                    "  {:>7}   (too few registers)",
                    a.address as usize + i * step
                ),
            }
        }
    }
    Ok(())
}

/// A Modbus exception code in words (application protocol spec, 7).
fn exception_words(code: u8) -> &'static str {
    match code {
        1 => "illegal function: the unit has no such register kind",
        2 => "illegal data address: no such register on the unit",
        3 => "illegal data value",
        4 => "server device failure",
        5 => "acknowledge: busy with a long operation",
        6 => "server device busy",
        10 => "gateway path unavailable",
        11 => "gateway target device failed to respond",
        _ => "an exception code of the unit's own",
    }
}
