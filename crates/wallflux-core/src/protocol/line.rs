//! Line protocol v1: the receiver (an incremental, sans-IO parser) and the
//! encoder.
//!
//! A thermocouple box sends one ASCII line per scan (the full specification,
//! for firmware writers, is `docs/line-protocol.md`):
//!
//! ```text
//! #1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9A
//! ```
//!
//! - `#<seq>`: scan counter, decimal `0..=4294967295`, wrapping.
//! - `<input>=<value>C` (linearised °C), `<input>=<value>mV` (raw EMF) or
//!   `<input>=open` (open thermocouple); inputs `1..=64`, each at most once.
//! - `cj=<value>C`: optional cold-junction temperature, last field if present.
//! - ` *<crc>`: CRC-16/CCITT-FALSE of every byte before the space that precedes
//!   `*`, four upper-case hex digits.
//! - The line body (everything before the terminator) is at most
//!   [`MAX_LINE_BYTES`] bytes; the terminator is `\n` or `\r\n`.
//!
//! # Receiving
//!
//! [`LineParser`] is a byte-at-a-time state machine: the serial edge hands it
//! whatever a read returned ([`LineParser::feed`] or [`LineParser::push`]) and
//! gets one outcome per line. It does no IO, reads no clock and never
//! allocates: the line is held in a fixed `heapless` buffer and numbers are
//! parsed from a slice of it with `core`'s `f64::from_str`.
//!
//! What it does with each kind of bad input (every case is counted in
//! [`LineCounters`]):
//!
//! - A body longer than [`MAX_LINE_BYTES`]: [`FrameError::Overlong`] is
//!   reported once, at the byte that overflows, and everything up to the next
//!   `\n` is discarded silently. The line after it is parsed normally.
//! - A byte above `0x7F` ([`FrameError::NotAscii`]) or a control byte other
//!   than the terminator ([`FrameError::ControlByte`]: NUL, TAB, DEL, a `\r`
//!   not directly before `\n`, ...): the line is rejected when it ends. The
//!   first such byte is reported.
//! - An empty line (`\n` or `\r\n` alone) is ignored and counted
//!   (`empty_lines`); firmware may send one at power-up to end any garbage.
//! - Otherwise the line is checked in this order: leading `#` (else
//!   [`FrameError::Syntax`]: garbage), checksum field present
//!   ([`FrameError::MissingCrc`]) and well formed ([`FrameError::Syntax`]),
//!   checksum value ([`FrameError::BadCrc`]), then the fields.
//! - Framing is by `\n` only, so the receiver resynchronises at the next line
//!   whatever came before: a bad line costs that line and nothing else.
//!
//! Sequence numbers (checked only on lines that passed every other check):
//! the gap to the previous frame, `seq - last - 1` in wrapping `u32`
//! arithmetic, is the number of lost scans ([`Frame::lost_before`]), so
//! `4294967295 → 0` is no loss. A gap above [`RESTART_GAP`] (which includes
//! any backward step) is taken as a restart of the source, not as billions of
//! lost scans. A repeat of the previous number is dropped as a duplicate
//! ([`FrameError::DuplicateSeq`]).
//!
//! The receiver checks syntax, not physics: `-500C` parses; the channel layer
//! judges plausibility. `mV` readings without `cj=` also parse (`cj_c` is
//! `None`): the source's configuration may name a cold-junction channel or a
//! fixed value, and the consumer decides.

use core::fmt::Write as _;

/// Most bytes in a line body: everything before the terminator (`\n`, or
/// `\r\n`, neither counted).
pub const MAX_LINE_BYTES: usize = 512;

/// Highest input number; inputs are `1..=MAX_INPUT`.
pub const MAX_INPUT: u8 = 64;

/// Most decimal digits (integer and fraction together) in one value: keeps
/// numbers to what a box can measure and rejects runaway garbage.
pub const MAX_VALUE_DIGITS: usize = 12;

/// A sequence gap above this many scans is taken as a source restart, not
/// as lost scans (at 1 Hz it is about 28 hours). Every backward step is
/// such a gap in wrapping arithmetic.
pub const RESTART_GAP: u32 = 100_000;

/// Decimals the encoder writes for °C values (trailing zeros trimmed).
pub const ENCODE_DECIMALS_C: usize = 2;

/// Decimals the encoder writes for mV values (trailing zeros trimmed): 1 µV,
/// the resolution of the NIST SRD 60 reference tables.
pub const ENCODE_DECIMALS_MV: usize = 3;

/// Length of the checksum field with its leading space: ` *XXXX`.
const CRC_FIELD_BYTES: usize = 6;

/// CRC-16/CCITT-FALSE: polynomial 0x1021, initial value 0xFFFF, no
/// reflection of input or output, final XOR 0.
///
/// Parameters and check value (`"123456789"` → 0x29B1) as catalogued in Greg
/// Cook's "Catalogue of parametrised CRC algorithms" (reveng), where the
/// algorithm is listed as CRC-16/IBM-3740 with alias CRC-16/CCITT-FALSE.
/// Bitwise MSB-first form: for each byte, `crc ^= byte << 8`, then eight
/// times shift left, XOR-ing in the polynomial when the bit shifted out was 1.
pub fn crc16_ccitt_false(data: &[u8]) -> u16 {
    let mut crc: u16 = 0xFFFF;
    for &byte in data {
        crc ^= u16::from(byte) << 8;
        for _ in 0..8 {
            crc = if crc & 0x8000 != 0 {
                (crc << 1) ^ 0x1021
            } else {
                crc << 1
            };
        }
    }
    crc
}

/// Unit of a reading as sent by the box.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Unit {
    /// Linearised temperature in °C (`C`).
    Celsius,
    /// Raw thermocouple EMF in mV (`mV`), to be cold-junction compensated.
    Millivolts,
}

/// One input's value in a frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Value {
    /// A number in the given unit (always finite).
    Reading { value: f64, unit: Unit },
    /// The box detected an open thermocouple (`open`).
    Open,
}

/// One scan, as received.
#[derive(Debug, Clone, PartialEq)]
pub struct Frame {
    /// Scan counter sent by the box.
    pub seq: u32,
    /// `(input, value)` in line order; inputs are distinct and in `1..=64`,
    /// and there is at least one.
    pub values: heapless::Vec<(u8, Value), 64>,
    /// Cold-junction temperature in °C, if the box sent `cj=`.
    pub cj_c: Option<f64>,
    /// Scans lost between the previous frame and this one (0 normally, and 0
    /// for the first frame and after a restart).
    pub lost_before: u32,
    /// The sequence jumped by more than [`RESTART_GAP`] (or backwards): the
    /// box restarted. Not set for the first frame after
    /// [`LineParser::new`] or [`LineParser::reset_sequence`].
    pub source_restarted: bool,
}

impl Frame {
    /// The value of `input`, if the frame carries it.
    pub fn value(&self, input: u8) -> Option<Value> {
        self.values
            .iter()
            .find(|(i, _)| *i == input)
            .map(|&(_, value)| value)
    }
}

/// Why a received line was rejected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum FrameError {
    /// The body exceeded `MAX_LINE_BYTES`; the rest of it, up to `\n`, is discarded.
    #[error("line longer than {MAX_LINE_BYTES} bytes, discarded up to the next newline")]
    Overlong,
    /// A byte above 0x7F (the first one in the line).
    #[error("non-ASCII byte 0x{byte:02X} in the line")]
    NotAscii { byte: u8 },
    /// A control byte (NUL, TAB, DEL, a `\r` not just before `\n`, ...): the first one.
    #[error("control byte 0x{byte:02X} in the line")]
    ControlByte { byte: u8 },
    /// No `*` checksum marker in the line.
    #[error("no ' *XXXX' checksum at the end of the line")]
    MissingCrc,
    /// The checksum sent (`expected`) differs from the one computed over the line.
    #[error("checksum mismatch: the line says {expected:04X}, its bytes give {computed:04X}")]
    BadCrc { expected: u16, computed: u16 },
    /// The line breaks the grammar at byte offset `at` (0 = the first byte).
    #[error("syntax error at byte {at}: {reason}")]
    Syntax { at: usize, reason: &'static str },
    /// An input number outside `1..=MAX_INPUT`.
    #[error("input {input} outside 1..={MAX_INPUT}")]
    BadInput { input: u16 },
    /// The same input appears twice in one line.
    #[error("input {input} appears twice in the line")]
    DuplicateInput { input: u8 },
    /// A value at byte offset `at` is not `[-]digits[.digits]` with at most `MAX_VALUE_DIGITS` digits.
    #[error("malformed value at byte {at}: expected [-]digits[.digits], at most {MAX_VALUE_DIGITS} digits")]
    BadValue { at: usize },
    /// The sequence number repeats the previous frame's: a duplicate, dropped.
    #[error("sequence number {seq} repeats the previous frame's; dropped as a duplicate")]
    DuplicateSeq { seq: u32 },
}

/// Why [`encode_frame`] could not write a line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum EncodeError {
    /// A frame needs at least one reading.
    #[error("a frame needs at least one reading")]
    NoReadings,
    /// An input number outside `1..=MAX_INPUT`.
    #[error("input {input} outside 1..={MAX_INPUT}")]
    BadInput { input: u8 },
    /// The same input given twice.
    #[error("input {input} given twice")]
    DuplicateInput { input: u8 },
    /// A value (or `cj_c`) is NaN or infinite.
    #[error("a value is not finite")]
    NotFinite,
    /// A value needs more than `MAX_VALUE_DIGITS` digits at the encoder's precision.
    #[error("a value needs more than {MAX_VALUE_DIGITS} digits")]
    ValueOutOfRange,
    /// The line body would exceed `MAX_LINE_BYTES`.
    #[error("the line would exceed {MAX_LINE_BYTES} bytes")]
    TooLong,
}

/// What the receiver has seen, cumulative since [`LineParser::new`].
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LineCounters {
    /// Frames accepted.
    pub frames: u64,
    /// Lines rejected as [`FrameError::Overlong`].
    pub overlong: u64,
    /// Lines rejected as [`FrameError::NotAscii`].
    pub not_ascii: u64,
    /// Lines rejected as [`FrameError::ControlByte`].
    pub control_bytes: u64,
    /// Lines rejected as [`FrameError::MissingCrc`].
    pub missing_crc: u64,
    /// Lines rejected as [`FrameError::BadCrc`].
    pub bad_crc: u64,
    /// Lines rejected as [`FrameError::Syntax`].
    pub syntax: u64,
    /// Lines rejected as [`FrameError::BadInput`].
    pub bad_input: u64,
    /// Lines rejected as [`FrameError::DuplicateInput`].
    pub duplicate_input: u64,
    /// Lines rejected as [`FrameError::BadValue`].
    pub bad_value: u64,
    /// Frames dropped as [`FrameError::DuplicateSeq`].
    pub duplicate_seq: u64,
    /// Empty lines, ignored.
    pub empty_lines: u64,
    /// Scans lost according to sequence gaps (sum of [`Frame::lost_before`]).
    pub lost_scans: u64,
    /// Source restarts detected from the sequence ([`Frame::source_restarted`]).
    pub restarts: u64,
}

/// `frames 120, bad_crc 2, ...`: each counter by its field name, zero
/// counts left out (frames always shown). For log lines.
impl core::fmt::Display for LineCounters {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        let all = [
            ("frames", self.frames),
            ("overlong", self.overlong),
            ("not_ascii", self.not_ascii),
            ("control_bytes", self.control_bytes),
            ("missing_crc", self.missing_crc),
            ("bad_crc", self.bad_crc),
            ("syntax", self.syntax),
            ("bad_input", self.bad_input),
            ("duplicate_input", self.duplicate_input),
            ("bad_value", self.bad_value),
            ("duplicate_seq", self.duplicate_seq),
            ("empty_lines", self.empty_lines),
            ("lost_scans", self.lost_scans),
            ("restarts", self.restarts),
        ];
        let mut first = true;
        for (name, n) in all {
            if n == 0 && name != "frames" {
                continue;
            }
            if !first {
                f.write_str(", ")?;
            }
            write!(f, "{name} {n}")?;
            first = false;
        }
        Ok(())
    }
}

impl LineCounters {
    /// Lines rejected, all kinds together (empty lines are not rejections).
    pub fn rejected(&self) -> u64 {
        self.overlong
            + self.not_ascii
            + self.control_bytes
            + self.missing_crc
            + self.bad_crc
            + self.syntax
            + self.bad_input
            + self.duplicate_input
            + self.bad_value
            + self.duplicate_seq
    }

    fn count(&mut self, error: &FrameError) {
        let counter = match error {
            FrameError::Overlong => &mut self.overlong,
            FrameError::NotAscii { .. } => &mut self.not_ascii,
            FrameError::ControlByte { .. } => &mut self.control_bytes,
            FrameError::MissingCrc => &mut self.missing_crc,
            FrameError::BadCrc { .. } => &mut self.bad_crc,
            FrameError::Syntax { .. } => &mut self.syntax,
            FrameError::BadInput { .. } => &mut self.bad_input,
            FrameError::DuplicateInput { .. } => &mut self.duplicate_input,
            FrameError::BadValue { .. } => &mut self.bad_value,
            FrameError::DuplicateSeq { .. } => &mut self.duplicate_seq,
        };
        *counter += 1;
    }
}

/// Incremental receiver for line protocol v1 (see the module docs for what it
/// does with each kind of bad input).
///
/// The IO edge owns the port and pumps bytes in:
///
/// ```
/// # use wallflux_core::protocol::line::LineParser;
/// let mut parser = LineParser::new();
/// let chunk = b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9A\n";
/// for outcome in parser.feed(chunk) {
///     let frame = outcome.expect("a valid line");
///     assert_eq!(frame.seq, 1042);
/// }
/// ```
#[derive(Debug, Clone)]
pub struct LineParser {
    /// The body of the line being received (without terminator).
    buf: heapless::Vec<u8, MAX_LINE_BYTES>,
    /// A `\r` arrived and is not yet known to be part of `\r\n`.
    cr_pending: bool,
    /// The line overflowed and was reported; skip to the next `\n`.
    discarding: bool,
    /// First byte-level fault in the current line, reported when it ends.
    fault: Option<FrameError>,
    /// Sequence number of the last accepted frame.
    last_seq: Option<u32>,
    counters: LineCounters,
}

impl Default for LineParser {
    fn default() -> Self {
        Self::new()
    }
}

impl LineParser {
    /// A receiver with an empty line, no sequence history and zero counters.
    pub fn new() -> Self {
        Self {
            buf: heapless::Vec::new(),
            cr_pending: false,
            discarding: false,
            fault: None,
            last_seq: None,
            counters: LineCounters::default(),
        }
    }

    /// Feed one byte. Returns the outcome when a line ends, or
    /// `Some(Err(FrameError::Overlong))` at the byte that makes the body
    /// overlong; `None` while a line is in progress, for an empty line, and
    /// for the discarded rest of an overlong line.
    pub fn push(&mut self, byte: u8) -> Option<Result<Frame, FrameError>> {
        if self.discarding {
            if byte == b'\n' {
                self.discarding = false;
            }
            return None;
        }
        if self.cr_pending {
            self.cr_pending = false;
            if byte == b'\n' {
                return self.end_line();
            }
            // A `\r` that is not part of the terminator.
            self.fault
                .get_or_insert(FrameError::ControlByte { byte: b'\r' });
        }
        match byte {
            b'\n' => return self.end_line(),
            b'\r' => {
                self.cr_pending = true;
                return None;
            }
            0x20..=0x7E => {}
            0x80..=0xFF => {
                self.fault.get_or_insert(FrameError::NotAscii { byte });
            }
            _ => {
                self.fault.get_or_insert(FrameError::ControlByte { byte });
            }
        }
        // Faulty bytes are stored too, so that they count toward the length.
        if self.buf.push(byte).is_err() {
            self.buf.clear();
            self.fault = None;
            self.discarding = true;
            self.counters.overlong += 1;
            return Some(Err(FrameError::Overlong));
        }
        None
    }

    /// Feed a chunk: an iterator over the outcomes of the lines it completes,
    /// in order. Drain it; bytes it has not reached when dropped are not fed.
    pub fn feed<'p, 'b>(&'p mut self, bytes: &'b [u8]) -> Feed<'p, 'b> {
        Feed {
            parser: self,
            bytes: bytes.iter(),
        }
    }

    /// What the receiver has seen so far.
    pub fn counters(&self) -> &LineCounters {
        &self.counters
    }

    /// Forget the last sequence number, so that the next frame's gap is not
    /// counted (lost or restart): call it when the port was reopened, since
    /// scans sent while it was closed are not lost on the line.
    pub fn reset_sequence(&mut self) {
        self.last_seq = None;
    }

    /// Drop the line received so far: call it when the port was reopened, so
    /// that the bytes before the reopen are not joined to the ones after.
    pub fn discard_partial_line(&mut self) {
        self.buf.clear();
        self.cr_pending = false;
        self.discarding = false;
        self.fault = None;
    }

    /// A `\n` arrived (outside an overlong line): judge the line and reset.
    fn end_line(&mut self) -> Option<Result<Frame, FrameError>> {
        let fault = self.fault.take();
        if self.buf.is_empty() && fault.is_none() {
            self.counters.empty_lines += 1;
            return None;
        }
        let parsed = match fault {
            Some(error) => Err(error),
            None => parse_line(&self.buf),
        };
        self.buf.clear();
        let outcome = parsed.and_then(|frame| self.sequence(frame));
        match &outcome {
            Ok(_) => self.counters.frames += 1,
            Err(error) => self.counters.count(error),
        }
        Some(outcome)
    }

    /// Apply the sequence rules to a frame that passed every other check.
    fn sequence(&mut self, mut frame: Frame) -> Result<Frame, FrameError> {
        if let Some(last) = self.last_seq {
            if frame.seq == last {
                return Err(FrameError::DuplicateSeq { seq: frame.seq });
            }
            let gap = frame.seq.wrapping_sub(last).wrapping_sub(1);
            if gap > RESTART_GAP {
                frame.source_restarted = true;
                self.counters.restarts += 1;
            } else {
                frame.lost_before = gap;
                self.counters.lost_scans += u64::from(gap);
            }
        }
        self.last_seq = Some(frame.seq);
        Ok(frame)
    }
}

/// Outcomes of the lines completed by one chunk; see [`LineParser::feed`].
#[derive(Debug)]
pub struct Feed<'p, 'b> {
    parser: &'p mut LineParser,
    bytes: core::slice::Iter<'b, u8>,
}

impl Iterator for Feed<'_, '_> {
    type Item = Result<Frame, FrameError>;

    fn next(&mut self) -> Option<Self::Item> {
        for &byte in self.bytes.by_ref() {
            if let Some(outcome) = self.parser.push(byte) {
                return Some(outcome);
            }
        }
        None
    }
}

/// Parse a complete line body whose bytes are all printable ASCII.
fn parse_line(line: &[u8]) -> Result<Frame, FrameError> {
    if line.first() != Some(&b'#') {
        return Err(syntax(0, "a line must start with '#'"));
    }
    let star = line
        .iter()
        .rposition(|&b| b == b'*')
        .ok_or(FrameError::MissingCrc)?;
    let (before_star, star_and_crc) = line.split_at(star);
    let payload = match before_star.split_last() {
        Some((b' ', payload)) => payload,
        _ => {
            return Err(syntax(
                star,
                "the checksum must follow a single space: ' *XXXX'",
            ))
        }
    };
    let crc_digits = star_and_crc.get(1..).unwrap_or_default();
    let expected = parse_crc_digits(crc_digits).ok_or(syntax(
        star + 1,
        "the checksum must be four upper-case hex digits at the end of the line",
    ))?;
    let computed = crc16_ccitt_false(payload);
    if expected != computed {
        return Err(FrameError::BadCrc { expected, computed });
    }
    parse_payload(payload)
}

/// Exactly four upper-case hex digits.
fn parse_crc_digits(digits: &[u8]) -> Option<u16> {
    if digits.len() != 4 {
        return None;
    }
    digits.iter().try_fold(0u16, |acc, &b| {
        let nibble = match b {
            b'0'..=b'9' => b - b'0',
            b'A'..=b'F' => b - b'A' + 10,
            _ => return None,
        };
        Some((acc << 4) | u16::from(nibble))
    })
}

/// Parse `#<seq>( <field>)*` (the checksum already removed and verified).
fn parse_payload(payload: &[u8]) -> Result<Frame, FrameError> {
    let mut cur = Cursor {
        bytes: payload,
        pos: 0,
    };
    // The leading '#' was checked by the caller.
    cur.pos = 1;
    let seq = parse_seq(&mut cur)?;
    let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
    let mut seen_inputs: u64 = 0;
    let mut cj_c = None;
    while !cur.at_end() {
        if !cur.eat(b' ') {
            return Err(syntax(cur.pos, "expected a single space between fields"));
        }
        if cur.at_end() {
            return Err(syntax(cur.pos, "more than one space before ' *'"));
        }
        if cj_c.is_some() {
            return Err(syntax(cur.pos, "cj= must be the last field"));
        }
        if cur.eat_slice(b"cj=") {
            cj_c = Some(parse_number(&mut cur)?);
            if !cur.eat(b'C') {
                return Err(syntax(cur.pos, "cj= takes a value in °C: cj=<value>C"));
            }
            continue;
        }
        let input = parse_input(&mut cur)?;
        let bit = 1u64 << (input - 1);
        if seen_inputs & bit != 0 {
            return Err(FrameError::DuplicateInput { input });
        }
        seen_inputs |= bit;
        if !cur.eat(b'=') {
            return Err(syntax(cur.pos, "expected '=' after the input number"));
        }
        let value = if cur.eat_slice(b"open") {
            Value::Open
        } else {
            let value = parse_number(&mut cur)?;
            let unit = if cur.eat(b'C') {
                Unit::Celsius
            } else if cur.eat_slice(b"mV") {
                Unit::Millivolts
            } else {
                return Err(syntax(cur.pos, "the unit must be 'C' or 'mV'"));
            };
            Value::Reading { value, unit }
        };
        // Distinct inputs in 1..=64 always fit; the check keeps this panic-free.
        if values.push((input, value)).is_err() {
            return Err(syntax(cur.pos, "more than 64 readings"));
        }
    }
    if values.is_empty() {
        return Err(syntax(cur.pos, "a line needs at least one reading"));
    }
    Ok(Frame {
        seq,
        values,
        cj_c,
        lost_before: 0,
        source_restarted: false,
    })
}

/// `seq`: 1 to 10 digits, no leading zero, at most `u32::MAX`.
fn parse_seq(cur: &mut Cursor<'_>) -> Result<u32, FrameError> {
    let at = cur.pos;
    let digits = cur.take_while(|b| b.is_ascii_digit());
    if digits.is_empty() {
        return Err(syntax(at, "expected the sequence number after '#'"));
    }
    if digits.len() > 1 && digits.first() == Some(&b'0') {
        return Err(syntax(at, "sequence number with a leading zero"));
    }
    decimal(digits)
        .filter(|_| digits.len() <= 10)
        .and_then(|n| u32::try_from(n).ok())
        .ok_or(syntax(at, "sequence number above 4294967295"))
}

/// `input`: 1 to 3 digits, no leading zero, then checked against `1..=64`.
fn parse_input(cur: &mut Cursor<'_>) -> Result<u8, FrameError> {
    let at = cur.pos;
    let digits = cur.take_while(|b| b.is_ascii_digit());
    if digits.is_empty() {
        return Err(syntax(at, "expected an input number or cj="));
    }
    if digits.len() > 3 {
        return Err(syntax(at, "input number longer than 3 digits"));
    }
    if digits.len() > 1 && digits.first() == Some(&b'0') {
        return Err(syntax(at, "input number with a leading zero"));
    }
    let input = decimal(digits)
        .and_then(|n| u16::try_from(n).ok())
        .ok_or(syntax(at, "input number not decimal"))?;
    match u8::try_from(input) {
        Ok(i) if (1..=MAX_INPUT).contains(&i) => Ok(i),
        _ => Err(FrameError::BadInput { input }),
    }
}

/// A value: `["-"] 1*DIGIT ["." 1*DIGIT]`, at most `MAX_VALUE_DIGITS` digits.
/// No `+`, no exponent, no NaN or infinity; leading zeros are allowed.
fn parse_number(cur: &mut Cursor<'_>) -> Result<f64, FrameError> {
    let at = cur.pos;
    let text = cur.take_while(|b| b.is_ascii_digit() || b == b'-' || b == b'.');
    let bad = FrameError::BadValue { at };
    let unsigned = text.strip_prefix(b"-").unwrap_or(text);
    let (int_part, frac_part) = match unsigned.iter().position(|&b| b == b'.') {
        Some(dot) => {
            let (int_part, dot_and_frac) = unsigned.split_at(dot);
            (int_part, dot_and_frac.get(1..))
        }
        None => (unsigned, None),
    };
    let all_digits = |s: &[u8]| !s.is_empty() && s.iter().all(u8::is_ascii_digit);
    if !all_digits(int_part) || frac_part.is_some_and(|f| !all_digits(f)) {
        return Err(bad);
    }
    let digit_count = int_part.len() + frac_part.map_or(0, <[u8]>::len);
    if digit_count > MAX_VALUE_DIGITS {
        return Err(bad);
    }
    core::str::from_utf8(text)
        .ok()
        .and_then(|s| s.parse::<f64>().ok())
        .filter(|v| v.is_finite())
        .ok_or(bad)
}

/// The value of a run of ASCII digits, `None` on overflow.
fn decimal(digits: &[u8]) -> Option<u64> {
    digits.iter().try_fold(0u64, |acc, &b| {
        acc.checked_mul(10)?
            .checked_add(u64::from(b.wrapping_sub(b'0')))
    })
}

fn syntax(at: usize, reason: &'static str) -> FrameError {
    FrameError::Syntax { at, reason }
}

/// Read position in a line body.
struct Cursor<'a> {
    bytes: &'a [u8],
    pos: usize,
}

impl<'a> Cursor<'a> {
    fn at_end(&self) -> bool {
        self.pos >= self.bytes.len()
    }

    /// Consume `byte` if it is next.
    fn eat(&mut self, byte: u8) -> bool {
        self.eat_slice(&[byte])
    }

    /// Consume `expected` if it comes next.
    fn eat_slice(&mut self, expected: &[u8]) -> bool {
        let rest = self.bytes.get(self.pos..).unwrap_or_default();
        if rest.starts_with(expected) {
            self.pos += expected.len();
            true
        } else {
            false
        }
    }

    /// Consume and return the longest run of bytes satisfying `keep`.
    fn take_while(&mut self, keep: impl Fn(u8) -> bool) -> &'a [u8] {
        let rest = self.bytes.get(self.pos..).unwrap_or_default();
        let n = rest.iter().take_while(|&&b| keep(b)).count();
        self.pos += n;
        rest.get(..n).unwrap_or_default()
    }
}

/// Write a complete line, checksum and `\n` included, into `out` (cleared
/// first; left empty on error).
///
/// Numbers are written with [`ENCODE_DECIMALS_C`] decimals for °C (values
/// and `cj_c`) and [`ENCODE_DECIMALS_MV`] for mV, rounded (Rust's `{:.N}`
/// formatting: exact decimal expansion, ties to even), trailing zeros and a
/// bare point trimmed, `-0` written as `0`. Every line it returns `Ok` for
/// is accepted by [`LineParser`], with the values as written.
pub fn encode_frame(
    seq: u32,
    values: &[(u8, Value)],
    cj_c: Option<f64>,
    out: &mut heapless::String<{ MAX_LINE_BYTES + 2 }>,
) -> Result<(), EncodeError> {
    out.clear();
    let result = write_frame(seq, values, cj_c, out);
    if result.is_err() {
        out.clear();
    }
    result
}

fn write_frame(
    seq: u32,
    values: &[(u8, Value)],
    cj_c: Option<f64>,
    out: &mut heapless::String<{ MAX_LINE_BYTES + 2 }>,
) -> Result<(), EncodeError> {
    if values.is_empty() {
        return Err(EncodeError::NoReadings);
    }
    write!(out, "#{seq}").map_err(|_| EncodeError::TooLong)?;
    let mut seen_inputs: u64 = 0;
    for &(input, value) in values {
        if !(1..=MAX_INPUT).contains(&input) {
            return Err(EncodeError::BadInput { input });
        }
        let bit = 1u64 << (input - 1);
        if seen_inputs & bit != 0 {
            return Err(EncodeError::DuplicateInput { input });
        }
        seen_inputs |= bit;
        write!(out, " {input}=").map_err(|_| EncodeError::TooLong)?;
        match value {
            Value::Open => push(out, "open")?,
            Value::Reading {
                value,
                unit: Unit::Celsius,
            } => {
                write_number(out, value, ENCODE_DECIMALS_C)?;
                push(out, "C")?;
            }
            Value::Reading {
                value,
                unit: Unit::Millivolts,
            } => {
                write_number(out, value, ENCODE_DECIMALS_MV)?;
                push(out, "mV")?;
            }
        }
    }
    if let Some(cj_c) = cj_c {
        push(out, " cj=")?;
        write_number(out, cj_c, ENCODE_DECIMALS_C)?;
        push(out, "C")?;
    }
    if out.len() + CRC_FIELD_BYTES > MAX_LINE_BYTES {
        return Err(EncodeError::TooLong);
    }
    let crc = crc16_ccitt_false(out.as_bytes());
    writeln!(out, " *{crc:04X}").map_err(|_| EncodeError::TooLong)
}

fn push(out: &mut heapless::String<{ MAX_LINE_BYTES + 2 }>, s: &str) -> Result<(), EncodeError> {
    out.push_str(s).map_err(|_| EncodeError::TooLong)
}

/// Write `value` rounded to `decimals`, trimmed, in the parser's number form.
fn write_number(
    out: &mut heapless::String<{ MAX_LINE_BYTES + 2 }>,
    value: f64,
    decimals: usize,
) -> Result<(), EncodeError> {
    if !value.is_finite() {
        return Err(EncodeError::NotFinite);
    }
    // Any value that fits MAX_VALUE_DIGITS fits here; larger ones overflow
    // the buffer, and are out of range anyway.
    let mut text: heapless::String<32> = heapless::String::new();
    write!(text, "{value:.decimals$}").map_err(|_| EncodeError::ValueOutOfRange)?;
    let trimmed = if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.')
    } else {
        text.as_str()
    };
    let trimmed = if trimmed == "-0" { "0" } else { trimmed };
    let digits = trimmed.bytes().filter(u8::is_ascii_digit).count();
    if digits > MAX_VALUE_DIGITS {
        return Err(EncodeError::ValueOutOfRange);
    }
    push(out, trimmed)
}

#[cfg(test)]
mod tests {
    #[test]
    fn counters_read_as_words_in_a_log_line() {
        let c = super::LineCounters {
            frames: 120,
            bad_crc: 2,
            lost_scans: 5,
            ..Default::default()
        };
        assert_eq!(c.to_string(), "frames 120, bad_crc 2, lost_scans 5");
        assert_eq!(super::LineCounters::default().to_string(), "frames 0");
    }

    use super::*;
    use proptest::prelude::*;

    /// The design's example line (docs/line-protocol.md, "Line
    /// protocol v1"); its CRC 5A9A was confirmed with crcmod 1.7 (PyPI),
    /// `crcmod.predefined.mkCrcFun('crc-ccitt-false')`.
    const EXAMPLE: &[u8] = b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9A\n";
    const EXAMPLE_PAYLOAD: &[u8] = b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C";

    fn c(value: f64) -> Value {
        Value::Reading {
            value,
            unit: Unit::Celsius,
        }
    }

    fn mv(value: f64) -> Value {
        Value::Reading {
            value,
            unit: Unit::Millivolts,
        }
    }

    /// `payload` + ` *CRC\n`, the CRC computed by our own function (itself
    /// checked against the catalogue and crcmod below), for grammar tests.
    fn sealed(payload: &str) -> Vec<u8> {
        let mut line = payload.as_bytes().to_vec();
        line.extend_from_slice(
            format!(" *{:04X}\n", crc16_ccitt_false(payload.as_bytes())).as_bytes(),
        );
        line
    }

    /// Every outcome of feeding `bytes` one at a time.
    fn outcomes(parser: &mut LineParser, bytes: &[u8]) -> Vec<Result<Frame, FrameError>> {
        bytes.iter().filter_map(|&b| parser.push(b)).collect()
    }

    /// The single outcome of one line fed to a fresh parser.
    fn parse_one(bytes: &[u8]) -> Result<Frame, FrameError> {
        let mut parser = LineParser::new();
        let mut all = outcomes(&mut parser, bytes);
        assert_eq!(
            all.len(),
            1,
            "expected exactly one outcome for {:?}",
            String::from_utf8_lossy(bytes)
        );
        all.remove(0)
    }

    fn frame_with_seq(seq: u32) -> Vec<u8> {
        sealed(&format!("#{seq} 1=20C"))
    }

    // ---- CRC ----------------------------------------------------------

    #[test]
    fn crc_check_value_from_the_catalogue() {
        // Greg Cook, "Catalogue of parametrised CRC algorithms" (reveng),
        // CRC-16/IBM-3740 alias CRC-16/CCITT-FALSE: check = 0x29B1.
        assert_eq!(crc16_ccitt_false(b"123456789"), 0x29B1);
    }

    #[test]
    fn crc_matches_crcmod_reference_vectors() {
        // Expected values computed with crcmod 1.7 (PyPI),
        // mkCrcFun('crc-ccitt-false'): poly 0x11021, init 0xFFFF, no
        // reflection, xorOut 0.
        assert_eq!(crc16_ccitt_false(b""), 0xFFFF);
        assert_eq!(crc16_ccitt_false(b"A"), 0xB915);
        let all_bytes: Vec<u8> = (0..=255u8).collect();
        assert_eq!(crc16_ccitt_false(&all_bytes), 0x3FBD);
        assert_eq!(crc16_ccitt_false(EXAMPLE_PAYLOAD), 0x5A9A);
        assert_eq!(
            crc16_ccitt_false(b"#4294967295 1=1203.75C 7=open 12=-0.183mV"),
            0x0962
        );
        assert_eq!(crc16_ccitt_false(b"#0 5=-12.5C 6=open cj=21C"), 0x83DB);
    }

    #[test]
    fn crc_detects_every_single_bit_error_in_the_example() {
        // A CRC whose generator has more than one term detects all
        // single-bit errors (Peterson & Brown, "Cyclic Codes for Error
        // Detection", Proc. IRE 1961); a wrong implementation need not.
        let good = crc16_ccitt_false(EXAMPLE_PAYLOAD);
        let mut data = EXAMPLE_PAYLOAD.to_vec();
        for i in 0..data.len() {
            for bit in 0..8 {
                data[i] ^= 1 << bit;
                assert_ne!(crc16_ccitt_false(&data), good, "byte {i} bit {bit}");
                data[i] ^= 1 << bit;
            }
        }
    }

    #[test]
    fn crc_detects_every_burst_of_up_to_16_bits() {
        // A CRC of degree 16 with a non-zero x^0 term detects every error
        // burst of length <= 16 (Peterson & Brown 1961). Bursts over the
        // 72 bits of "123456789": first and last bit of the burst set, any
        // pattern between.
        let message = b"123456789";
        let good = crc16_ccitt_false(message);
        let bits = message.len() * 8;
        let mut data = message.to_vec();
        for len in 1..=16usize {
            let inner_patterns = if len <= 2 { 1 } else { 1u32 << (len - 2) };
            for start in 0..=(bits - len) {
                for inner in 0..inner_patterns {
                    let pattern: u32 = if len == 1 {
                        1
                    } else {
                        1 | (inner << 1) | (1 << (len - 1))
                    };
                    let flip = |data: &mut [u8]| {
                        for k in 0..len {
                            if pattern >> k & 1 == 1 {
                                let bit = start + k;
                                data[bit / 8] ^= 0x80 >> (bit % 8);
                            }
                        }
                    };
                    flip(&mut data);
                    assert_ne!(crc16_ccitt_false(&data), good, "burst len {len} at {start}");
                    flip(&mut data);
                }
            }
        }
    }

    // ---- valid frames ------------------------------------------------

    #[test]
    fn parses_the_design_example() {
        let frame = parse_one(EXAMPLE).unwrap();
        assert_eq!(frame.seq, 1042);
        assert_eq!(
            frame.values.as_slice(),
            &[(1, c(812.4)), (2, c(640.1)), (3, mv(33.275))]
        );
        assert_eq!(frame.cj_c, Some(24.6));
        assert_eq!(frame.lost_before, 0);
        assert!(!frame.source_restarted);
        assert_eq!(frame.value(3), Some(mv(33.275)));
        assert_eq!(frame.value(4), None);
    }

    #[test]
    fn accepts_crlf() {
        let line = b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9A\r\n";
        assert_eq!(parse_one(line).unwrap().seq, 1042);
    }

    #[test]
    fn parses_the_documented_second_and_third_examples() {
        // Lines and CRCs as in docs/line-protocol.md (CRCs from crcmod 1.7).
        let frame = parse_one(b"#4294967295 1=1203.75C 7=open 12=-0.183mV *0962\n").unwrap();
        assert_eq!(frame.seq, u32::MAX);
        assert_eq!(
            frame.values.as_slice(),
            &[(1, c(1203.75)), (7, Value::Open), (12, mv(-0.183))]
        );
        assert_eq!(
            frame.cj_c, None,
            "mV without cj= parses; the consumer decides"
        );

        let frame = parse_one(b"#0 5=-12.5C 6=open cj=21C *83DB\r\n").unwrap();
        assert_eq!(frame.seq, 0);
        assert_eq!(frame.values.as_slice(), &[(5, c(-12.5)), (6, Value::Open)]);
        assert_eq!(frame.cj_c, Some(21.0));
    }

    #[test]
    fn accepts_number_forms_at_their_limits() {
        let frame = parse_one(&sealed(
            "#7 1=0C 2=-0.5C 3=007.250mV 4=123456789012C 5=-0.00000000001mV",
        ))
        .unwrap();
        assert_eq!(
            frame.values.as_slice(),
            &[
                (1, c(0.0)),
                (2, c(-0.5)),
                (3, mv(7.25)),
                (4, c(123_456_789_012.0)),
                (5, mv(-1e-11))
            ]
        );
    }

    #[test]
    fn accepts_all_64_inputs_in_any_order() {
        let mut payload = String::from("#9");
        for input in (1..=64).rev() {
            payload.push_str(&format!(" {input}=1C"));
        }
        let frame = parse_one(&sealed(&payload)).unwrap();
        assert_eq!(frame.values.len(), 64);
        assert_eq!(frame.values.first(), Some(&(64, c(1.0))));
        assert_eq!(frame.values.last(), Some(&(1, c(1.0))));
    }

    /// A valid payload whose sealed body is exactly `body_len` bytes.
    fn payload_of_body_len(body_len: usize) -> String {
        let target = body_len - CRC_FIELD_BYTES;
        let mut payload = String::from("#0");
        let mut input = 10;
        // Fill with 11-byte readings until a cj= field of 6..=17 bytes
        // (1 to 12 digits) closes the gap exactly.
        while target - payload.len() > 17 {
            payload.push_str(&format!(" {input}=100.25C"));
            input += 1;
        }
        let digits = target - payload.len() - 5;
        payload.push_str(&format!(" cj={}C", "0".repeat(digits - 1) + "5"));
        assert_eq!(payload.len(), target);
        payload
    }

    #[test]
    fn a_valid_line_of_exactly_512_bytes_is_accepted() {
        let line = sealed(&payload_of_body_len(MAX_LINE_BYTES));
        assert_eq!(line.len(), MAX_LINE_BYTES + 1);
        assert!(parse_one(&line).is_ok());
        // The terminator is not counted: with \r\n it still fits.
        let mut crlf = line[..MAX_LINE_BYTES].to_vec();
        crlf.extend_from_slice(b"\r\n");
        assert!(parse_one(&crlf).is_ok());
    }

    // ---- framing errors ----------------------------------------------

    #[test]
    fn length_limit_is_512_bytes_before_the_terminator() {
        let mut p = LineParser::new();
        let mut fits = vec![b'x'; MAX_LINE_BYTES];
        fits.push(b'\n');
        assert_eq!(
            outcomes(&mut p, &fits),
            vec![Err(syntax(0, "a line must start with '#'"))]
        );
        let mut fits_crlf = vec![b'x'; MAX_LINE_BYTES];
        fits_crlf.extend_from_slice(b"\r\n");
        assert_eq!(outcomes(&mut p, &fits_crlf).len(), 1);
        assert_eq!(p.counters().overlong, 0);

        let mut long = vec![b'x'; MAX_LINE_BYTES + 1];
        long.push(b'\n');
        assert_eq!(outcomes(&mut p, &long), vec![Err(FrameError::Overlong)]);
        assert_eq!(p.counters().overlong, 1);
    }

    #[test]
    fn overlong_is_reported_once_at_the_overflow_then_resyncs() {
        let mut p = LineParser::new();
        let junk = vec![b'#'; 5000];
        for (i, &b) in junk.iter().enumerate() {
            let outcome = p.push(b);
            if i == MAX_LINE_BYTES {
                assert_eq!(
                    outcome,
                    Some(Err(FrameError::Overlong)),
                    "at the 513th byte"
                );
            } else {
                assert_eq!(outcome, None, "byte {i}");
            }
        }
        assert_eq!(p.push(b'\n'), None, "already reported");
        let after = outcomes(&mut p, EXAMPLE);
        assert_eq!(after.len(), 1);
        assert_eq!(after[0].as_ref().unwrap().seq, 1042);
        assert_eq!(p.counters().overlong, 1);
        assert_eq!(p.counters().frames, 1);
        assert_eq!(p.counters().rejected(), 1);
    }

    #[test]
    fn non_ascii_is_rejected_with_the_first_offending_byte() {
        // A degree sign in UTF-8 (C2 B0), a typical firmware mistake.
        let line = sealed("#5 1=812.4\u{b0}C");
        let mut p = LineParser::new();
        assert_eq!(
            outcomes(&mut p, &line),
            vec![Err(FrameError::NotAscii { byte: 0xC2 })]
        );
        assert_eq!(p.counters().not_ascii, 1);
    }

    #[test]
    fn control_bytes_are_rejected() {
        let mut p = LineParser::new();
        for (bytes, byte) in [
            (&b"#5 1=\x0020C *0000\n"[..], 0x00),
            (b"#5\t1=20C *0000\n", 0x09),
            (b"#5 1=20C\x7F *0000\n", 0x7F),
            (b"#5 1=20C\r *0000\n", 0x0D),
            (b"#5 1=20C *0000\r\r\n", 0x0D),
        ] {
            assert_eq!(
                outcomes(&mut p, bytes),
                vec![Err(FrameError::ControlByte { byte })]
            );
        }
        // NUL alone on a line is not an empty line.
        assert_eq!(
            outcomes(&mut p, b"\0\n"),
            vec![Err(FrameError::ControlByte { byte: 0 })]
        );
        assert_eq!(p.counters().control_bytes, 6);
        assert_eq!(p.counters().empty_lines, 0);
    }

    #[test]
    fn empty_lines_are_ignored_and_counted() {
        let mut p = LineParser::new();
        assert!(outcomes(&mut p, b"\n\r\n\n").is_empty());
        assert_eq!(p.counters().empty_lines, 3);
        assert_eq!(p.counters().rejected(), 0);
    }

    #[test]
    fn garbage_then_a_valid_frame_resyncs() {
        let mut p = LineParser::new();
        let mut stream = b"\xFF\x00garbage 1=2C\n  \n*\n".to_vec();
        stream.extend_from_slice(EXAMPLE);
        let got = outcomes(&mut p, &stream);
        assert_eq!(got.len(), 4);
        assert_eq!(got[0], Err(FrameError::NotAscii { byte: 0xFF }));
        assert_eq!(got[1], Err(syntax(0, "a line must start with '#'")));
        assert_eq!(got[2], Err(syntax(0, "a line must start with '#'")));
        assert_eq!(got[3].as_ref().unwrap().seq, 1042);
        // Garbage without a newline spoils the line it runs into, only that one.
        let mut p = LineParser::new();
        let mut stream = b"\x00\x00".to_vec();
        stream.extend_from_slice(&frame_with_seq(1));
        stream.extend_from_slice(&frame_with_seq(2));
        let got = outcomes(&mut p, &stream);
        assert_eq!(got[0], Err(FrameError::ControlByte { byte: 0 }));
        assert_eq!(got[1].as_ref().unwrap().seq, 2);
    }

    // ---- checksum errors ---------------------------------------------

    #[test]
    fn checksum_errors() {
        assert_eq!(
            parse_one(b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9B\n"),
            Err(FrameError::BadCrc {
                expected: 0x5A9B,
                computed: 0x5A9A
            })
        );
        assert_eq!(parse_one(b"#1042 1=812.4C\n"), Err(FrameError::MissingCrc));
        let malformed = "the checksum must be four upper-case hex digits at the end of the line";
        assert_eq!(
            parse_one(b"#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5a9a\n"),
            Err(syntax(45, malformed))
        );
        assert_eq!(parse_one(b"#1 1=2C *5A9\n"), Err(syntax(9, malformed)));
        assert_eq!(parse_one(b"#1 1=2C *5A9A0\n"), Err(syntax(9, malformed)));
        assert_eq!(
            parse_one(b"#1 1=2C*5A9A\n"),
            Err(syntax(
                7,
                "the checksum must follow a single space: ' *XXXX'"
            ))
        );
    }

    #[test]
    fn every_single_bit_flip_of_the_example_line_is_rejected() {
        // Flip each bit of each body byte (not the terminator): whatever the
        // flip hits (payload, '*', the hex digits, or making a byte
        // non-ASCII or a control), the line must not be accepted.
        let body = &EXAMPLE[..EXAMPLE.len() - 1];
        for i in 0..body.len() {
            for bit in 0..8 {
                let mut line = body.to_vec();
                line[i] ^= 1 << bit;
                line.push(b'\n');
                let mut p = LineParser::new();
                let got = outcomes(&mut p, &line);
                assert!(
                    got.iter().all(|o| o.is_err()),
                    "flip of byte {i} bit {bit} accepted: {got:?}"
                );
            }
        }
    }

    // ---- grammar errors ----------------------------------------------

    #[test]
    fn syntax_errors_name_the_offset_and_reason() {
        let cases: &[(&str, usize, &str)] = &[
            ("1042 1=2C", 0, "a line must start with '#'"),
            ("# 1=2C", 1, "expected the sequence number after '#'"),
            ("#01 1=2C", 1, "sequence number with a leading zero"),
            ("#4294967296 1=2C", 1, "sequence number above 4294967295"),
            ("#99999999999 1=2C", 1, "sequence number above 4294967295"),
            ("#1  1=2C", 3, "expected an input number or cj="),
            ("#1 1=2C ", 8, "more than one space before ' *'"),
            ("#1 1=2Cx", 7, "expected a single space between fields"),
            ("#1,1=2C", 2, "expected a single space between fields"),
            ("#1 1=2K", 6, "the unit must be 'C' or 'mV'"),
            ("#1 1=2c", 6, "the unit must be 'C' or 'mV'"),
            ("#1 1=2mv", 6, "the unit must be 'C' or 'mV'"),
            ("#1 1=2 C", 6, "the unit must be 'C' or 'mV'"),
            ("#1 1=1e3C", 6, "the unit must be 'C' or 'mV'"),
            ("#1 1:2C", 4, "expected '=' after the input number"),
            ("#1 01=2C", 3, "input number with a leading zero"),
            ("#1 1000=2C", 3, "input number longer than 3 digits"),
            ("#1 x=2C", 3, "expected an input number or cj="),
            ("#1", 2, "a line needs at least one reading"),
            ("#1 cj=20C", 9, "a line needs at least one reading"),
            ("#1 cj=20C 1=2C", 10, "cj= must be the last field"),
            ("#1 1=2C cj=20C cj=21C", 15, "cj= must be the last field"),
            (
                "#1 1=2C cj=1.0mV",
                14,
                "cj= takes a value in °C: cj=<value>C",
            ),
        ];
        let mut p = LineParser::new();
        for &(payload, at, reason) in cases {
            assert_eq!(
                outcomes(&mut p, &sealed(payload)),
                vec![Err(syntax(at, reason))],
                "{payload}"
            );
        }
        assert_eq!(p.counters().syntax, cases.len() as u64);
    }

    #[test]
    fn cj_open_is_a_bad_value() {
        // `cj=` must carry a number: "open" is not one.
        assert_eq!(
            parse_one(&sealed("#1 1=2C cj=open")),
            Err(FrameError::BadValue { at: 11 })
        );
    }

    #[test]
    fn input_numbers_outside_1_to_64_are_bad_inputs() {
        let mut p = LineParser::new();
        for (payload, input) in [("#1 0=2C", 0), ("#1 65=2C", 65), ("#1 999=open", 999)] {
            assert_eq!(
                outcomes(&mut p, &sealed(payload)),
                vec![Err(FrameError::BadInput { input })]
            );
        }
        assert_eq!(p.counters().bad_input, 3);
    }

    #[test]
    fn a_repeated_input_is_rejected() {
        assert_eq!(
            parse_one(&sealed("#1 3=2C 4=open 3=2.1mV")),
            Err(FrameError::DuplicateInput { input: 3 })
        );
    }

    #[test]
    fn malformed_values_are_bad_values() {
        let mut p = LineParser::new();
        for payload in [
            "#1 1=nanC",
            "#1 1=-infC",
            "#1 1=infC",
            "#1 1=+1C",
            "#1 1=.5C",
            "#1 1=5.C",
            "#1 1=--1C",
            "#1 1=1-2C",
            "#1 1=1.2.3C",
            "#1 1=-C",
            "#1 1=OPEN",
            "#1 1=C",
            "#1 1=1234567890123C",
            "#1 1=1.234567890123mV",
            "#1 1=0000000000001C",
        ] {
            assert_eq!(
                outcomes(&mut p, &sealed(payload)),
                vec![Err(FrameError::BadValue { at: 5 })],
                "{payload}"
            );
        }
    }

    // ---- sequence ----------------------------------------------------

    fn accept(p: &mut LineParser, seq: u32) -> Frame {
        let mut got = outcomes(p, &frame_with_seq(seq));
        assert_eq!(got.len(), 1);
        got.remove(0).unwrap()
    }

    #[test]
    fn sequence_gaps_count_lost_scans() {
        let mut p = LineParser::new();
        assert_eq!(accept(&mut p, 10).lost_before, 0);
        assert_eq!(accept(&mut p, 11).lost_before, 0);
        assert_eq!(accept(&mut p, 15).lost_before, 3, "12, 13, 14 lost");
        assert_eq!(p.counters().lost_scans, 3);
        assert_eq!(p.counters().frames, 3);
    }

    #[test]
    fn sequence_wraps_without_loss() {
        let mut p = LineParser::new();
        accept(&mut p, u32::MAX - 1);
        assert_eq!(accept(&mut p, u32::MAX).lost_before, 0);
        assert_eq!(
            accept(&mut p, 0).lost_before,
            0,
            "4294967295 → 0 is the next scan"
        );
        let mut p = LineParser::new();
        accept(&mut p, u32::MAX - 1);
        assert_eq!(accept(&mut p, 1).lost_before, 2, "4294967295 and 0 lost");
        assert_eq!(p.counters().restarts, 0);
    }

    #[test]
    fn a_rejected_line_shows_up_as_a_lost_scan() {
        let mut p = LineParser::new();
        accept(&mut p, 1);
        let mut corrupt = frame_with_seq(2);
        corrupt[3] = b'x';
        assert!(matches!(
            outcomes(&mut p, &corrupt)[..],
            [Err(FrameError::BadCrc { .. })]
        ));
        assert_eq!(accept(&mut p, 3).lost_before, 1);
    }

    #[test]
    fn big_jumps_and_backward_steps_are_restarts() {
        let mut p = LineParser::new();
        accept(&mut p, 5000);
        let f = accept(&mut p, 0);
        assert!(f.source_restarted, "backwards: restart");
        assert_eq!(f.lost_before, 0);
        accept(&mut p, 1);
        // Boundary: a gap of exactly RESTART_GAP is still lost scans.
        let f = accept(&mut p, 1 + RESTART_GAP + 1);
        assert_eq!((f.lost_before, f.source_restarted), (RESTART_GAP, false));
        let f = accept(&mut p, 1 + RESTART_GAP + 1 + RESTART_GAP + 2);
        assert_eq!((f.lost_before, f.source_restarted), (0, true));
        assert_eq!(p.counters().restarts, 2);
        assert_eq!(p.counters().lost_scans, u64::from(RESTART_GAP));
    }

    #[test]
    fn a_repeated_sequence_number_is_dropped() {
        let mut p = LineParser::new();
        accept(&mut p, 7);
        assert_eq!(
            outcomes(&mut p, &frame_with_seq(7)),
            vec![Err(FrameError::DuplicateSeq { seq: 7 })]
        );
        assert_eq!(accept(&mut p, 8).lost_before, 0);
        assert_eq!(p.counters().duplicate_seq, 1);
        assert_eq!(p.counters().frames, 2);
    }

    #[test]
    fn reset_sequence_forgets_the_gap() {
        let mut p = LineParser::new();
        accept(&mut p, 7);
        p.reset_sequence();
        let f = accept(&mut p, 7000);
        assert_eq!((f.lost_before, f.source_restarted), (0, false));
        let f = accept(&mut p, 7);
        assert!(f.source_restarted, "history resumes after the reset");
    }

    #[test]
    fn discard_partial_line_drops_bytes_before_a_reopen() {
        let mut p = LineParser::new();
        assert!(outcomes(&mut p, b"#12 1=3").is_empty());
        p.discard_partial_line();
        assert_eq!(outcomes(&mut p, EXAMPLE)[0].as_ref().unwrap().seq, 1042);
    }

    // ---- chunked feeding ---------------------------------------------

    /// A stream mixing valid lines, garbage, CRLF, an overlong line, empty
    /// lines and a duplicate.
    fn mixed_stream() -> Vec<u8> {
        let mut s = Vec::new();
        s.extend_from_slice(b"\x00\xFFnoise");
        s.extend_from_slice(&frame_with_seq(1));
        s.extend_from_slice(EXAMPLE);
        s.extend_from_slice(b"\n\r\n");
        s.extend_from_slice(&vec![b'7'; 700]);
        s.extend_from_slice(b"\r\n");
        let mut crlf = frame_with_seq(1043);
        crlf.insert(crlf.len() - 1, b'\r');
        s.extend_from_slice(&crlf);
        s.extend_from_slice(&frame_with_seq(1043));
        s.extend_from_slice(b"#1050 1=2C *0000\n");
        s.extend_from_slice(&frame_with_seq(1051));
        s.extend_from_slice(b"#1052 1=2");
        s
    }

    fn feed_in_chunks(
        bytes: &[u8],
        cuts: &[usize],
    ) -> (Vec<Result<Frame, FrameError>>, LineCounters) {
        let mut p = LineParser::new();
        let mut got = Vec::new();
        let mut start = 0;
        for &cut in cuts.iter().chain(core::iter::once(&bytes.len())) {
            let cut = cut.clamp(start, bytes.len());
            got.extend(p.feed(&bytes[start..cut]));
            start = cut;
        }
        (got, *p.counters())
    }

    #[test]
    fn chunked_feeding_matches_byte_by_byte_at_every_split() {
        let stream = mixed_stream();
        let mut p = LineParser::new();
        let reference = outcomes(&mut p, &stream);
        let reference_counters = *p.counters();
        // The reference itself is what the stream should give.
        assert_eq!(reference.len(), 7);
        assert!(matches!(
            reference[0],
            Err(FrameError::ControlByte { byte: 0 })
        ));
        assert_eq!(reference[1].as_ref().unwrap().seq, 1042);
        assert_eq!(reference[2], Err(FrameError::Overlong));
        assert_eq!(reference[3].as_ref().unwrap().lost_before, 0);
        assert_eq!(reference[4], Err(FrameError::DuplicateSeq { seq: 1043 }));
        assert!(matches!(reference[5], Err(FrameError::BadCrc { .. })));
        assert_eq!(reference[6].as_ref().unwrap().lost_before, 7);
        assert_eq!(reference_counters.empty_lines, 2);

        for cut in 0..=stream.len() {
            assert_eq!(
                feed_in_chunks(&stream, &[cut]),
                (reference.clone(), reference_counters),
                "cut {cut}"
            );
        }
        for size in 1..=64 {
            let cuts: Vec<usize> = (size..stream.len()).step_by(size).collect();
            assert_eq!(
                feed_in_chunks(&stream, &cuts).0,
                reference,
                "chunk size {size}"
            );
        }
    }

    // ---- encoder -----------------------------------------------------

    fn encode(seq: u32, values: &[(u8, Value)], cj_c: Option<f64>) -> Result<String, EncodeError> {
        let mut out = heapless::String::new();
        encode_frame(seq, values, cj_c, &mut out).map(|()| out.as_str().to_owned())
    }

    #[test]
    fn encoder_reproduces_the_design_example() {
        assert_eq!(
            encode(
                1042,
                &[(1, c(812.4)), (2, c(640.1)), (3, mv(33.275))],
                Some(24.6)
            )
            .unwrap(),
            "#1042 1=812.4C 2=640.1C 3=33.275mV cj=24.6C *5A9A\n"
        );
        assert_eq!(
            encode(0, &[(5, c(-12.5)), (6, Value::Open)], Some(21.0)).unwrap(),
            "#0 5=-12.5C 6=open cj=21C *83DB\n"
        );
    }

    #[test]
    fn encoder_rounds_trims_and_normalises_negative_zero() {
        assert_eq!(
            encode(
                1,
                &[
                    (1, c(812.449)),
                    (2, c(-0.004)),
                    (3, mv(-0.0004)),
                    (4, mv(1.0)),
                    (5, c(100.0))
                ],
                None
            )
            .unwrap(),
            String::from_utf8(sealed("#1 1=812.45C 2=0C 3=0mV 4=1mV 5=100C")).unwrap()
        );
    }

    #[test]
    fn encoder_errors() {
        assert_eq!(encode(1, &[], None), Err(EncodeError::NoReadings));
        assert_eq!(
            encode(1, &[(0, c(1.0))], None),
            Err(EncodeError::BadInput { input: 0 })
        );
        assert_eq!(
            encode(1, &[(65, c(1.0))], None),
            Err(EncodeError::BadInput { input: 65 })
        );
        assert_eq!(
            encode(1, &[(2, c(1.0)), (2, Value::Open)], None),
            Err(EncodeError::DuplicateInput { input: 2 })
        );
        assert_eq!(
            encode(1, &[(1, c(f64::NAN))], None),
            Err(EncodeError::NotFinite)
        );
        assert_eq!(
            encode(1, &[(1, c(1.0))], Some(f64::INFINITY)),
            Err(EncodeError::NotFinite)
        );
        // 10 integer + 2 decimal digits is the most; 1e10 + 0.01 needs 13.
        assert!(encode(1, &[(1, c(9_999_999_999.99))], None).is_ok());
        assert_eq!(
            encode(1, &[(1, c(10_000_000_000.01))], None),
            Err(EncodeError::ValueOutOfRange)
        );
        assert_eq!(
            encode(1, &[(1, mv(1e300))], None),
            Err(EncodeError::ValueOutOfRange)
        );
    }

    #[test]
    fn sixty_four_readings_at_one_decimal_do_not_fit_in_512_bytes() {
        // "#4294967295" + 9 × " N=812.4C" + 55 × " NN=812.4C" + " *XXXX"
        // = 11 + 81 + 550 + 6 = 648 bytes > 512.
        let values: Vec<(u8, Value)> = (1..=64).map(|i| (i, c(812.4))).collect();
        assert_eq!(encode(u32::MAX, &values, None), Err(EncodeError::TooLong));
        // 49 such readings fit: 11 + 81 + 40 × 10 + 6 = 498 bytes.
        assert_eq!(
            encode(u32::MAX, &values[..49], None).map(|s| s.len() - 1),
            Ok(498)
        );
        let mut out = heapless::String::new();
        let _ = encode_frame(1, &values, None, &mut out);
        assert!(out.is_empty(), "left empty on error");
    }

    // ---- properties --------------------------------------------------

    fn arb_value() -> impl Strategy<Value = Value> {
        prop_oneof![
            1 => Just(Value::Open),
            4 => (-300.0f64..2000.0).prop_map(c),
            4 => (-20.0f64..80.0).prop_map(mv),
            1 => (-1e9f64..1e9).prop_map(c),
        ]
    }

    fn arb_readings(max: usize) -> impl Strategy<Value = Vec<(u8, Value)>> {
        (
            Just((1..=MAX_INPUT).collect::<Vec<u8>>()).prop_shuffle(),
            proptest::collection::vec(arb_value(), 1..=max),
        )
            .prop_map(|(inputs, values)| inputs.into_iter().zip(values).collect())
    }

    fn close(sent: Value, got: Value) -> bool {
        match (sent, got) {
            (Value::Open, Value::Open) => true,
            (Value::Reading { value: a, unit: ua }, Value::Reading { value: b, unit: ub }) => {
                let half_step = match ua {
                    Unit::Celsius => 0.5e-2,
                    Unit::Millivolts => 0.5e-3,
                };
                // Half a unit in the last place written, plus f64 rounding of
                // values up to 1e9.
                ua == ub && (a - b).abs() <= half_step + 1e-6
            }
            _ => false,
        }
    }

    /// Invariants of any run: every outcome is counted once, and every
    /// accepted frame has 1..=64 distinct inputs in range and finite values.
    fn assert_well_formed(
        p: &LineParser,
        got: &[Result<Frame, FrameError>],
    ) -> Result<(), TestCaseError> {
        let counters = *p.counters();
        prop_assert_eq!(counters.frames + counters.rejected(), got.len() as u64);
        for frame in got.iter().flatten() {
            prop_assert!(!frame.values.is_empty());
            let mut seen = 0u64;
            for &(input, value) in &frame.values {
                prop_assert!((1..=MAX_INPUT).contains(&input));
                prop_assert!(seen & (1 << (input - 1)) == 0);
                seen |= 1 << (input - 1);
                if let Value::Reading { value, .. } = value {
                    prop_assert!(value.is_finite());
                }
            }
            if let Some(cj_c) = frame.cj_c {
                prop_assert!(cj_c.is_finite());
            }
            // The encoder takes back whatever the parser accepted (it never
            // writes longer than it reads), and its line parses to the same.
            let line = encode(frame.seq, &frame.values, frame.cj_c);
            prop_assert!(line.is_ok(), "{:?} for {:?}", line, frame);
            let again = parse_one(line.unwrap_or_default().as_bytes());
            prop_assert!(again.is_ok(), "{:?}", again);
            let again = again.unwrap_or_else(|_| frame.clone());
            prop_assert_eq!(again.seq, frame.seq);
            prop_assert_eq!(again.values.len(), frame.values.len());
            for (&(si, sv), &(gi, gv)) in frame.values.iter().zip(again.values.iter()) {
                prop_assert_eq!(si, gi);
                prop_assert!(close(sv, gv), "{:?} → {:?}", sv, gv);
            }
        }
        Ok(())
    }

    proptest! {
        #[test]
        fn encode_then_parse_round_trips(
            seq in any::<u32>(),
            readings in arb_readings(20),
            cj_c in proptest::option::of(-50.0f64..150.0),
        ) {
            let line = encode(seq, &readings, cj_c).expect("20 readings always fit");
            let frame = parse_one(line.as_bytes()).expect("the parser accepts what the encoder writes");
            prop_assert_eq!(frame.seq, seq);
            prop_assert_eq!(frame.values.len(), readings.len());
            for (&(si, sv), &(gi, gv)) in readings.iter().zip(frame.values.iter()) {
                prop_assert_eq!(si, gi);
                prop_assert!(close(sv, gv), "{:?} → {:?}", sv, gv);
            }
            match (cj_c, frame.cj_c) {
                (None, None) => {}
                (Some(a), Some(b)) => prop_assert!((a - b).abs() <= 0.5e-2 + 1e-9),
                other => prop_assert!(false, "cj {:?}", other),
            }
        }

        #[test]
        fn encoder_output_is_always_accepted_or_refused_cleanly(
            seq in any::<u32>(),
            readings in arb_readings(64),
            wild in proptest::collection::vec((1u8..=64, -1e13f64..1e13), 0..3),
        ) {
            let mut readings = readings;
            for (input, value) in wild {
                if let Some(slot) = readings.iter_mut().find(|(i, _)| *i == input) {
                    slot.1 = c(value);
                }
            }
            match encode(seq, &readings, Some(25.0)) {
                Ok(line) => {
                    prop_assert!(line.len() <= MAX_LINE_BYTES + 1);
                    prop_assert!(parse_one(line.as_bytes()).is_ok());
                }
                Err(e) => prop_assert!(matches!(e, EncodeError::TooLong | EncodeError::ValueOutOfRange), "{:?}", e),
            }
        }

        #[test]
        fn arbitrary_bytes_never_panic_and_accepted_frames_are_well_formed(
            bytes in proptest::collection::vec(any::<u8>(), 0..2000).prop_map(|mut bytes| {
                // Make line ends and protocol characters frequent: bytes
                // below 36 become one of them, the rest stay as they are.
                for b in &mut bytes {
                    if let Some(&special) = b"\n #=*1.C\r mV-open\n #=*1.C\r mV-open".get(usize::from(*b)) {
                        *b = special;
                    }
                }
                bytes
            }),
        ) {
            let mut p = LineParser::new();
            let got = outcomes(&mut p, &bytes);
            assert_well_formed(&p, &got)?;
        }

        #[test]
        fn sealed_arbitrary_payloads_never_panic_and_accepted_frames_are_well_formed(
            payloads in proptest::collection::vec(
                prop_oneof![
                    // Mostly valid: input 65..=69, a repeated input and
                    // over-long numbers still occur.
                    "#(0|[1-9][0-9]{0,9})( ([1-9]|[1-6][0-9])=(open|-?[0-9]{1,7}(\\.[0-9]{1,7})?(C|mV))){1,6}( cj=-?[0-9]{1,3}(\\.[0-9])?C)?",
                    // Near misses of every kind.
                    "#[0-9]{0,3}( ?(cj=|[0-9]{1,3}=)?(open|-?[0-9.]{0,14}(C|mV)?)){0,8}",
                ],
                1..8,
            ),
        ) {
            // Payloads close to the grammar, with a correct checksum, so that
            // the field parser (behind the CRC check) sees them.
            let mut p = LineParser::new();
            let mut got = Vec::new();
            for payload in &payloads {
                got.extend(outcomes(&mut p, &sealed(payload)));
            }
            prop_assert_eq!(got.len(), payloads.len());
            assert_well_formed(&p, &got)?;
        }

        #[test]
        fn any_garbage_then_newline_then_a_frame_resyncs(
            garbage in proptest::collection::vec(any::<u8>(), 0..1500),
            seq in any::<u32>(),
            readings in arb_readings(10),
        ) {
            let line = encode(seq, &readings, None).unwrap();
            let mut p = LineParser::new();
            let _ = outcomes(&mut p, &garbage);
            let _ = p.push(b'\n');
            p.reset_sequence();
            let got = outcomes(&mut p, line.as_bytes());
            prop_assert_eq!(got.len(), 1);
            prop_assert_eq!(got[0].as_ref().map(|f| f.seq), Ok(seq));
        }

        #[test]
        fn random_chunking_gives_the_same_outcomes(
            cuts in proptest::collection::vec(0usize..1000, 0..20),
        ) {
            let stream = mixed_stream();
            let mut cuts = cuts;
            cuts.sort_unstable();
            let mut p = LineParser::new();
            let reference = outcomes(&mut p, &stream);
            prop_assert_eq!(feed_in_chunks(&stream, &cuts), (reference, *p.counters()));
        }
    }
}
