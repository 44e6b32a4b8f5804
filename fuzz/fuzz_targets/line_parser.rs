//! Line protocol v1 receiver on arbitrary bytes: it must never panic, must
//! account for every outcome in its counters, must give the same outcomes
//! however the bytes are chunked, and every frame it accepts must be well
//! formed and re-encodable by `encode_frame`.
//!
//! The first input byte picks the mode: even, the rest is fed as it is; odd,
//! each `\n`-separated piece of the rest is sealed with its correct checksum
//! first, so that the fuzzer also reaches the field parser behind the CRC
//! check.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wallflux::acquire::line::{
    crc16_ccitt_false, encode_frame, Frame, FrameError, LineParser, Value, MAX_INPUT,
};

fuzz_target!(|data: &[u8]| {
    let Some((&mode, body)) = data.split_first() else {
        return;
    };
    let stream = if mode & 1 == 0 {
        body.to_vec()
    } else {
        let mut sealed = Vec::with_capacity(body.len() + 8);
        for piece in body.split(|&b| b == b'\n') {
            sealed.extend_from_slice(piece);
            let crc = crc16_ccitt_false(piece);
            sealed.extend_from_slice(format!(" *{crc:04X}\n").as_bytes());
        }
        sealed
    };

    // Byte by byte.
    let mut single = LineParser::new();
    let reference: Vec<Result<Frame, FrameError>> =
        stream.iter().filter_map(|&b| single.push(b)).collect();
    let counters = *single.counters();
    assert_eq!(
        counters.frames + counters.rejected(),
        reference.len() as u64
    );

    // In chunks whose sizes come from the data itself.
    let mut chunked = LineParser::new();
    let mut outcomes = Vec::new();
    let mut rest = &stream[..];
    let mut size = 1;
    while !rest.is_empty() {
        let (chunk, tail) = rest.split_at(size.min(rest.len()));
        outcomes.extend(chunked.feed(chunk));
        size = usize::from(chunk.first().copied().unwrap_or(0) % 61) + 1;
        rest = tail;
    }
    assert_eq!(outcomes, reference);
    assert_eq!(*chunked.counters(), counters);

    for frame in reference.iter().flatten() {
        assert!(!frame.values.is_empty());
        let mut seen = 0u64;
        for &(input, value) in &frame.values {
            assert!((1..=MAX_INPUT).contains(&input));
            assert_eq!(seen & (1 << (input - 1)), 0, "duplicate input");
            seen |= 1 << (input - 1);
            if let Value::Reading { value, .. } = value {
                assert!(value.is_finite());
            }
        }
        let mut line = heapless::String::new();
        encode_frame(frame.seq, &frame.values, frame.cj_c, &mut line)
            .expect("the encoder takes back every accepted frame");
        let mut again = LineParser::new();
        let back: Vec<_> = again.feed(line.as_bytes()).collect();
        let same_inputs = |f: &Frame| {
            f.seq == frame.seq
                && f.values
                    .iter()
                    .map(|v| v.0)
                    .eq(frame.values.iter().map(|v| v.0))
        };
        assert!(
            matches!(&back[..], [Ok(f)] if same_inputs(f)),
            "re-encoded line {line:?} gave {back:?}"
        );
    }
});
