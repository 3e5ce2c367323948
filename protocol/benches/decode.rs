//! Decoder throughput: one poll's reply (FC 04, 8 registers — the simulator's input block) through each
//! decoder, whole and byte by byte, and behind noise. Run: `cargo bench -p oedolog-protocol`.
//! Frames per second = 1 / the reported time per iteration.

use divan::{Bencher, black_box};
use oedolog_protocol::rtu::{RtuMaster, RtuSlave, encode_adu, encode_response};
use oedolog_protocol::tcp::{MbapHeader, TcpMaster, encode_response as tcp_response};
use oedolog_protocol::{Request, Response, UnitId};

fn main() {
    divan::main();
}

fn request() -> Request {
    Request::ReadInputRegisters { address: 0, quantity: 8 }
}

fn reply() -> Vec<u8> {
    encode_response(UnitId(1), &Response::ReadInputRegisters(vec![1, 0x86A0, 0, 0x4E20, 2000, 1, 0, 42]))
}

#[divan::bench]
fn rtu_master_whole_reply(bencher: Bencher<'_, '_>) {
    let (request, reply) = (request(), reply());
    let mut master = RtuMaster::new();
    bencher.bench_local(|| {
        master.begin(UnitId(1), &request).unwrap();
        master.push(black_box(&reply));
        black_box(master.decode().unwrap().unwrap());
    });
}

#[divan::bench]
fn rtu_master_byte_by_byte(bencher: Bencher<'_, '_>) {
    let (request, reply) = (request(), reply());
    let mut master = RtuMaster::new();
    bencher.bench_local(|| {
        master.begin(UnitId(1), &request).unwrap();
        for byte in &reply {
            master.push(std::slice::from_ref(black_box(byte)));
        }
        black_box(master.decode().unwrap().unwrap());
    });
}

#[divan::bench]
fn rtu_master_behind_40_noise_bytes(bencher: Bencher<'_, '_>) {
    let (request, reply) = (request(), reply());
    let noisy: Vec<u8> = (0u8..40).map(|i| i.wrapping_mul(37) ^ 0x5A).chain(reply).collect();
    let mut master = RtuMaster::new();
    bencher.bench_local(|| {
        master.begin(UnitId(1), &request).unwrap();
        master.push(black_box(&noisy));
        black_box(master.decode().unwrap().unwrap());
    });
}

#[divan::bench]
fn rtu_slave_request(bencher: Bencher<'_, '_>) {
    let mut pdu = Vec::new();
    request().encode(&mut pdu);
    let frame = encode_adu(UnitId(1), &pdu);
    let mut slave = RtuSlave::new();
    bencher.bench_local(|| {
        slave.push(black_box(&frame));
        black_box(slave.decode().unwrap());
    });
}

#[divan::bench]
fn tcp_master_whole_reply(bencher: Bencher<'_, '_>) {
    let request = request();
    let mut master = TcpMaster::new();
    let values = vec![1, 0x86A0, 0, 0x4E20, 2000, 1, 0, 42];
    bencher.bench_local(|| {
        master.begin(UnitId(1), &request).unwrap();
        let header = MbapHeader { transaction_id: master.outstanding_transaction().unwrap(), unit: UnitId(1) };
        let reply = tcp_response(header, &Response::ReadInputRegisters(values.clone()));
        master.push(black_box(&reply));
        black_box(master.decode().unwrap().unwrap());
    });
}
