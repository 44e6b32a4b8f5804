//! Modbus RTU, sans IO: the read requests of a bus poll (planned so that
//! each unit's registers take as few requests as possible), the check of a
//! reply frame, and the decoding of registers into readings. The edge
//! (`acquire::modbus`) owns the port, the timing and the retries; nothing
//! here allocates or blocks.
//!
//! Sources: *MODBUS Application Protocol Specification V1.1b3* (function
//! codes 03 and 04, at most 125 registers a request, exception replies with
//! the function code's high bit set) and *MODBUS over Serial Line
//! Specification and Implementation Guide V1.02* (the RTU frame: unit,
//! PDU, CRC-16 low byte first; the 3.5-character silence between frames,
//! a fixed 1.75 ms above 19 200 baud), both of the Modbus Organization.

use crate::bounded::{Full, PushWithin};

/// The most registers one read request may ask for (application protocol
/// spec, 6.3 and 6.4).
pub const MAX_REGISTERS: u16 = 125;
/// The most points (registers read as one value) on one source.
pub const MAX_POINTS: usize = 64;
/// The most requests one poll of a source takes (each point its own, at
/// worst).
pub const MAX_REQUESTS: usize = MAX_POINTS;
/// The longest reply frame: unit, function, byte count, 250 bytes, CRC.
pub const MAX_REPLY_BYTES: usize = 3 + 2 * MAX_REGISTERS as usize + 2;

/// CRC-16/MODBUS (polynomial 0x8005 reflected, initial value 0xFFFF), as
/// the serial line spec's appendix computes it bit by bit. Check value:
/// 0x4B37 for the ASCII bytes `123456789` (the CRC-16/MODBUS entry of the
/// CRC RevEng catalogue of parametrised CRCs; the value from memory).
pub fn crc16(bytes: &[u8]) -> u16 {
    let mut crc: u16 = 0xFFFF;
    for &b in bytes {
        crc ^= b as u16;
        for _ in 0..8 {
            crc = if crc & 1 != 0 {
                (crc >> 1) ^ 0xA001
            } else {
                crc >> 1
            };
        }
    }
    crc
}

crate::word_enum! {
    /// Which registers a point is read from (`[[channel]] function`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
    pub enum Function {
        /// Input registers, function code 04 (the "3xxxx" of many manuals).
        Input = "input",
        /// Holding registers, function code 03 (the "4xxxx").
        Holding = "holding",
    }
}

impl Function {
    /// The function code on the wire.
    pub fn code(self) -> u8 {
        match self {
            Function::Holding => 0x03,
            Function::Input => 0x04,
        }
    }
}

crate::word_enum! {
    /// How a point's registers hold its value (`[[channel]] data_type`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum DataType {
        /// One register, two's complement.
        I16 = "i16",
        /// One register, unsigned.
        U16 = "u16",
        /// Two registers, two's complement.
        I32 = "i32",
        /// Two registers, unsigned.
        U32 = "u32",
        /// Two registers, IEEE 754 single precision.
        F32 = "f32",
    }
}

impl DataType {
    /// Registers the value takes.
    pub fn registers(self) -> u16 {
        match self {
            DataType::I16 | DataType::U16 => 1,
            DataType::I32 | DataType::U32 | DataType::F32 => 2,
        }
    }
}

crate::word_enum! {
    /// Which register of a 32-bit value comes first (`[[channel]]
    /// word_order`). Within a register the high byte is always first.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum WordOrder {
        /// The register with the high 16 bits first (the protocol's own
        /// byte order carried over to words).
        HighFirst = "high_first",
        /// The register with the low 16 bits first ("word-swapped").
        LowFirst = "low_first",
    }
}

/// A register's raw value as the module sent it, before scaling: what
/// `open_values` are compared with.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Raw {
    Int(i64),
    Float(f32),
}

impl Raw {
    pub fn as_f64(self) -> f64 {
        match self {
            Raw::Int(i) => i as f64,
            Raw::Float(f) => f as f64,
        }
    }
}

/// The raw value of `regs` (at least `dt.registers()` of them) as `dt`,
/// in `order`.
pub fn decode(regs: &[u16], dt: DataType, order: WordOrder) -> Option<Raw> {
    let n = dt.registers() as usize;
    let r = regs.get(..n)?;
    let word32 = || -> u32 {
        let (hi, lo) = match order {
            WordOrder::HighFirst => (r[0], r[1]),
            WordOrder::LowFirst => (r[1], r[0]),
        };
        ((hi as u32) << 16) | lo as u32
    };
    Some(match dt {
        DataType::I16 => Raw::Int(r[0] as i16 as i64),
        DataType::U16 => Raw::Int(r[0] as i64),
        DataType::I32 => Raw::Int(word32() as i32 as i64),
        DataType::U32 => Raw::Int(word32() as i64),
        DataType::F32 => Raw::Float(f32::from_bits(word32())),
    })
}

/// How one point is read and turned into a value.
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    pub unit: u8,
    pub function: Function,
    /// 0-based, as on the wire.
    pub address: u16,
    pub data_type: DataType,
    pub word_order: WordOrder,
    /// value = raw × scale + offset.
    pub scale: f64,
    pub offset: f64,
    /// Raw values the module sends for a broken sensor.
    pub open_values: heapless::Vec<f64, 4>,
}

/// What a point's registers say.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Value {
    /// raw × scale + offset, finite.
    Number(f64),
    /// One of the module's `open_values`.
    Open,
    /// Not a finite number (an f32 NaN or infinity).
    NotANumber,
}

impl Point {
    /// The value of this point from its registers.
    pub fn value(&self, regs: &[u16]) -> Option<Value> {
        let raw = decode(regs, self.data_type, self.word_order)?;
        let r = raw.as_f64();
        if self.open_values.contains(&r) {
            return Some(Value::Open);
        }
        let v = r * self.scale + self.offset;
        Some(if v.is_finite() {
            Value::Number(v)
        } else {
            Value::NotANumber
        })
    }

    fn last_address(&self) -> u32 {
        self.address as u32 + self.data_type.registers() as u32 - 1
    }
}

/// One read request of a poll, and the points it carries.
#[derive(Debug, Clone, PartialEq)]
pub struct Request {
    pub unit: u8,
    pub function: Function,
    pub address: u16,
    pub count: u16,
    /// Indices into the planned points, each with its first register's
    /// offset in the reply.
    pub points: heapless::Vec<(u8, u16), MAX_POINTS>,
}

impl Request {
    /// The request frame: unit, function, address, count, CRC.
    pub fn frame(&self) -> [u8; 8] {
        let mut f = [0u8; 8];
        f[0] = self.unit;
        f[1] = self.function.code();
        f[2..4].copy_from_slice(&self.address.to_be_bytes());
        f[4..6].copy_from_slice(&self.count.to_be_bytes());
        let crc = crc16(&f[..6]);
        f[6..8].copy_from_slice(&crc.to_le_bytes());
        f
    }

    /// The length of a normal reply to it.
    pub fn reply_len(&self) -> usize {
        5 + 2 * self.count as usize
    }
}

/// The requests that read `points` in as few as possible: per unit and
/// function, points whose registers are contiguous or overlap share a
/// request, up to [`MAX_REGISTERS`]. Units in the order they first appear.
/// More than [`MAX_POINTS`] points are refused (validation refuses them
/// first).
pub fn plan(points: &[Point]) -> Result<heapless::Vec<Request, MAX_REQUESTS>, Full> {
    let mut order: heapless::Vec<u8, MAX_POINTS> = heapless::Vec::new();
    for i in 0..points.len() {
        order.push_within(i as u8, "Modbus points on a source")?;
    }
    // Stable: by first appearance of the unit, then function, then address.
    let first_seen = |unit: u8| points.iter().position(|p| p.unit == unit).unwrap_or(0);
    order.sort_unstable_by_key(|&i| {
        let p = &points[i as usize];
        (first_seen(p.unit), p.function, p.address, i)
    });
    let mut out: heapless::Vec<Request, MAX_REQUESTS> = heapless::Vec::new();
    for i in order {
        let p = &points[i as usize];
        if let Some(r) = out.last_mut() {
            let end = r.address as u32 + r.count as u32; // one past
            let new_end = end.max(p.last_address() + 1);
            if r.unit == p.unit
                && r.function == p.function
                && (p.address as u32) <= end
                && new_end - r.address as u32 <= MAX_REGISTERS as u32
            {
                r.count = (new_end - r.address as u32) as u16;
                r.points
                    .push_within((i, p.address - r.address), "Modbus points on a source")?;
                continue;
            }
        }
        let mut pts = heapless::Vec::new();
        pts.push_within((i, 0), "Modbus points on a source")?;
        out.push_within(
            Request {
                unit: p.unit,
                function: p.function,
                address: p.address,
                count: p.data_type.registers(),
                points: pts,
            },
            "Modbus requests of a poll",
        )?;
    }
    Ok(out)
}

/// Why a reply was not taken.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    /// Fewer bytes than a frame can be, or than the reply must be.
    Short,
    /// The CRC does not match: a damaged frame.
    Crc,
    /// A valid frame from another unit, or for another function: a late
    /// reply to an earlier request (never taken as this one's).
    NotOurs,
    /// The byte count disagrees with the request.
    WrongLength,
    /// The unit answered with this exception code (1 illegal function,
    /// 2 illegal data address, 3 illegal data value, 4 device failure, …).
    Exception(u8),
}

/// Checks `frame` as the reply to `req`; its registers when it is one.
/// A frame is taken only when its CRC, unit, function and byte count all
/// match: a reply that arrives late, to an earlier request, is refused
/// rather than shifting every later reading.
pub fn check_reply(
    req: &Request,
    frame: &[u8],
    regs: &mut heapless::Vec<u16, { MAX_REGISTERS as usize }>,
) -> Result<(), Fault> {
    regs.clear();
    if frame.len() < 5 {
        return Err(Fault::Short);
    }
    let (body, crc) = frame.split_at(frame.len() - 2);
    if crc16(body).to_le_bytes() != [crc[0], crc[1]] {
        return Err(Fault::Crc);
    }
    if body[0] != req.unit {
        return Err(Fault::NotOurs);
    }
    if body[1] == req.function.code() | 0x80 {
        return if body.len() == 3 {
            Err(Fault::Exception(body[2]))
        } else {
            Err(Fault::WrongLength)
        };
    }
    if body[1] != req.function.code() {
        return Err(Fault::NotOurs);
    }
    let n = body[2] as usize;
    if n != 2 * req.count as usize || body.len() != 3 + n {
        return Err(Fault::WrongLength);
    }
    for w in body[3..].chunks_exact(2) {
        regs.push_within(u16::from_be_bytes([w[0], w[1]]), "registers of a reply")
            .map_err(|_| Fault::WrongLength)?;
    }
    Ok(())
}

/// How many bytes of a reply to `req` to wait for, given what arrived:
/// an exception reply is 5 bytes, a normal one [`Request::reply_len`].
pub fn expected_len(req: &Request, head: &[u8]) -> usize {
    match head.get(1) {
        Some(&f) if f == req.function.code() | 0x80 => 5,
        _ => req.reply_len(),
    }
}

/// The silence that ends a frame at `baud` (3.5 characters of 11 bits; a
/// fixed 1.75 ms above 19 200 baud), µs.
pub fn inter_frame_us(baud: u32) -> u32 {
    if baud > 19_200 {
        1_750
    } else {
        // 3.5 × 11 bits, rounded up.
        (38_500_000u64).div_ceil(baud.max(1) as u64) as u32
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crc_check_value_of_the_spec() {
        // CRC-16/MODBUS check value (the CRC of ASCII "123456789"), as the
        // CRC RevEng catalogue lists it (from memory).
        assert_eq!(crc16(b"123456789"), 0x4B37);
        // A read request often printed in module manuals (the bytes here
        // from memory): unit 1, FC 03, address 0, 1 register, CRC 0x0A84
        // sent low byte first (84 0A).
        let r = Request {
            unit: 1,
            function: Function::Holding,
            address: 0,
            count: 1,
            points: heapless::Vec::new(),
        };
        assert_eq!(r.frame(), [0x01, 0x03, 0x00, 0x00, 0x00, 0x01, 0x84, 0x0A]);
    }

    #[test]
    fn every_type_and_word_order_decodes_as_computed_by_hand() {
        use DataType::*;
        use WordOrder::*;
        // 0xFF38 = -200 as i16, 65336 as u16.
        assert_eq!(decode(&[0xFF38], I16, HighFirst), Some(Raw::Int(-200)));
        assert_eq!(decode(&[0xFF38], U16, HighFirst), Some(Raw::Int(65336)));
        // 0x0001_86A0 = 100000; swapped: registers [0x86A0, 0x0001].
        assert_eq!(
            decode(&[0x0001, 0x86A0], U32, HighFirst),
            Some(Raw::Int(100_000))
        );
        assert_eq!(
            decode(&[0x86A0, 0x0001], U32, LowFirst),
            Some(Raw::Int(100_000))
        );
        // 0xFFFE_7960 = -100000 as i32.
        assert_eq!(
            decode(&[0xFFFE, 0x7960], I32, HighFirst),
            Some(Raw::Int(-100_000))
        );
        assert_eq!(
            decode(&[0x7960, 0xFFFE], I32, LowFirst),
            Some(Raw::Int(-100_000))
        );
        // 812.5 as f32 = 0x444B_2000 (sign 0, exponent 136, mantissa
        // 0x4B2000: 1.5869140625 × 2^9).
        assert_eq!(
            decode(&[0x444B, 0x2000], F32, HighFirst),
            Some(Raw::Float(812.5))
        );
        assert_eq!(
            decode(&[0x2000, 0x444B], F32, LowFirst),
            Some(Raw::Float(812.5))
        );
        // Too few registers.
        assert_eq!(decode(&[0x444B], F32, HighFirst), None);
    }

    fn point(unit: u8, f: Function, address: u16, dt: DataType) -> Point {
        Point {
            unit,
            function: f,
            address,
            data_type: dt,
            word_order: WordOrder::HighFirst,
            scale: 1.0,
            offset: 0.0,
            open_values: heapless::Vec::new(),
        }
    }

    #[test]
    fn scale_offset_and_open_sentinels() {
        let mut p = point(1, Function::Input, 0, DataType::I16);
        p.scale = 0.1;
        p.open_values.push(32767.0).unwrap();
        assert_eq!(p.value(&[8125]), Some(Value::Number(812.5)));
        assert_eq!(p.value(&[0x7FFF]), Some(Value::Open));
        let mut f = point(1, Function::Input, 0, DataType::F32);
        f.offset = -273.15;
        assert_eq!(f.value(&[0x7FC0, 0x0000]), Some(Value::NotANumber));
        let Some(Value::Number(v)) = f.value(&[0x4388, 0x9333]) else {
            panic!()
        };
        // 0x43889333 = 273.15 (f32 nearest): 0 within f32 rounding.
        assert!(v.abs() < 1e-4, "{v}");
    }

    #[test]
    fn contiguous_registers_share_a_request_up_to_125() {
        use DataType::*;
        use Function::*;
        let pts = [
            point(3, Input, 2, I16),
            point(3, Input, 0, I16),
            point(3, Input, 1, F32),  // overlaps 1..=2
            point(3, Input, 10, I16), // a gap: its own request
            point(7, Input, 0, I16),
            point(3, Holding, 3, I16), // another function
        ];
        let plan = plan(&pts).unwrap();
        let got: Vec<(u8, u8, u16, u16, usize)> = plan
            .iter()
            .map(|r| {
                (
                    r.unit,
                    r.function.code(),
                    r.address,
                    r.count,
                    r.points.len(),
                )
            })
            .collect();
        assert_eq!(
            got,
            [
                (3, 4, 0, 3, 3),
                (3, 4, 10, 1, 1),
                (3, 3, 3, 1, 1),
                (7, 4, 0, 1, 1)
            ]
        );
        // The offsets name each point's first register in the reply.
        let first = &plan[0];
        assert!(
            first.points.contains(&(1, 0))
                && first.points.contains(&(2, 1))
                && first.points.contains(&(0, 2))
        );
        // 130 contiguous registers: 125, then 5.
        let many: Vec<Point> = (0..64).map(|i| point(1, Input, i * 2, U32)).collect();
        let plan = super::plan(&many).unwrap();
        let too_many: Vec<Point> = (0..65).map(|i| point(1, Input, i, I16)).collect();
        assert_eq!(super::plan(&too_many).unwrap_err().limit, MAX_POINTS);
        assert_eq!(plan.iter().map(|r| r.count).collect::<Vec<_>>(), [124, 4]);
    }

    #[test]
    fn a_reply_is_taken_only_when_everything_matches() {
        let req = Request {
            unit: 3,
            function: Function::Input,
            address: 0,
            count: 2,
            points: heapless::Vec::new(),
        };
        let mut frame = vec![3u8, 4, 4, 0x1F, 0xBD, 0xFF, 0x38];
        let crc = crc16(&frame);
        frame.extend_from_slice(&crc.to_le_bytes());
        let mut regs = heapless::Vec::new();
        assert_eq!(check_reply(&req, &frame, &mut regs), Ok(()));
        assert_eq!(regs.as_slice(), &[0x1FBD, 0xFF38]);
        // One bit flipped: the CRC says so.
        let mut bad = frame.clone();
        bad[4] ^= 0x01;
        assert_eq!(check_reply(&req, &bad, &mut regs), Err(Fault::Crc));
        // A valid frame from unit 5 (a late reply): not ours.
        let mut other = frame.clone();
        other[0] = 5;
        let n = other.len();
        let crc = crc16(&other[..n - 2]);
        other[n - 2..].copy_from_slice(&crc.to_le_bytes());
        assert_eq!(check_reply(&req, &other, &mut regs), Err(Fault::NotOurs));
        // A valid frame of the right unit with one register: wrong length.
        let mut one = vec![3u8, 4, 2, 0x00, 0x01];
        let crc = crc16(&one);
        one.extend_from_slice(&crc.to_le_bytes());
        assert_eq!(check_reply(&req, &one, &mut regs), Err(Fault::WrongLength));
        // Exception 02 (illegal data address).
        let mut ex = vec![3u8, 0x84, 0x02];
        let crc = crc16(&ex);
        ex.extend_from_slice(&crc.to_le_bytes());
        assert_eq!(expected_len(&req, &ex), 5);
        assert_eq!(check_reply(&req, &ex, &mut regs), Err(Fault::Exception(2)));
        assert_eq!(check_reply(&req, &ex[..3], &mut regs), Err(Fault::Short));
    }

    #[test]
    fn the_silence_between_frames() {
        // 9600 baud: 3.5 × 11 bits = 38.5 bits = 4.0104 ms.
        assert_eq!(inter_frame_us(9600), 4011);
        assert_eq!(inter_frame_us(19_200), 2006);
        // Above 19 200 baud the spec fixes 1.75 ms.
        assert_eq!(inter_frame_us(115_200), 1750);
    }
}
