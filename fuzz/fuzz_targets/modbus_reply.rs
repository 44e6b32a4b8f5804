//! A Modbus RTU reply of any bytes, to a request planned from the first
//! bytes: taken only when it is the answer (then exactly the registers
//! asked for, every point decodable), else a fault; never a panic.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wallflux::protocol::modbus::{check_reply, plan, DataType, Function, Point, WordOrder};

fuzz_target!(|data: &[u8]| {
    if data.len() < 4 {
        return;
    }
    let types = [DataType::I16, DataType::U16, DataType::I32, DataType::U32, DataType::F32];
    let point = Point {
        unit: data[0].clamp(1, 247),
        function: if data[1] & 1 == 0 { Function::Input } else { Function::Holding },
        address: u16::from(data[2]) * 3,
        data_type: types[data[3] as usize % types.len()],
        word_order: if data[3] & 0x80 == 0 { WordOrder::HighFirst } else { WordOrder::LowFirst },
        scale: 0.1,
        offset: -5.0,
        open_values: heapless::Vec::new(),
    };
    let reqs = plan(std::slice::from_ref(&point)).expect("one point fits");
    let req = &reqs[0];
    let mut regs = heapless::Vec::new();
    if check_reply(req, &data[4..], &mut regs).is_ok() {
        assert_eq!(regs.len(), req.count as usize);
        assert!(point.value(&regs).is_some());
    }
});
