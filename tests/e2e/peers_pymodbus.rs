//! The oedolog simulator read and written by an independent Modbus client: pymodbus 3.16.1
//! (`tests/peers/read_sim.py`), over TCP and over RTU on a socat pty pair.
//!
//! The script only reports what the simulator answered; the checks against the simulator's register
//! map live here. It must not drive oedolog-protocol — that direction is `protocol_vs_pymodbus`.

use std::process::Command;

use anyhow::{Context, Result, bail};
use oedolog_tests::{
    Finished, Simulator, ascii_words, i32_high_word_first, pty_pair, python_peer, run_to_end, temp_dir,
    u32_high_word_first,
};
use serde_json::{Value, json};

/// Units asked; the simulator's default is four frames, units 1..=4.
const UNITS: [u8; 3] = [1, 2, 3];

/// Plausible ranges for the first reading of a frame, in the simulator's register units.
pub(crate) mod plausible {
    /// Load in 0.1 N: more than zero (frames start under a seating load) and under 100 kN, well above
    /// a bench-top consolidation frame's capacity (common practice).
    pub(crate) const LOAD_0P1N: std::ops::RangeInclusive<i32> = 1..=1_000_000;
    /// Displacement in 0.1 µm: within ±25 mm, the travel of a long-stroke dial gauge or LVDT (from memory).
    pub(crate) const DISPLACEMENT_0P1UM: std::ops::RangeInclusive<i32> = -250_000..=250_000;
    /// Temperature in 0.01 °C: a laboratory between 0 and 50 °C (common practice: tests run near 20 °C).
    pub(crate) const TEMPERATURE_0P01C: std::ops::RangeInclusive<i16> = 0..=5_000;
}

/// What the test writes to each unit: a distinct averaging count (1..=64) and tag per unit, so a write
/// landing on the wrong unit would show.
fn plan_for(unit: u8) -> (u16, String) {
    (10 + u16::from(unit), format!("cell {unit} (e2e)"))
}

fn plan_json() -> String {
    let mut plan = serde_json::Map::new();
    for unit in UNITS {
        let (averaging, tag) = plan_for(unit);
        plan.insert(unit.to_string(), json!({ "averaging": averaging, "tag": tag }));
    }
    Value::Object(plan).to_string()
}

fn registers(outcome: &Value, what: &str) -> Vec<u16> {
    let words = outcome
        .get("registers")
        .and_then(Value::as_array)
        .unwrap_or_else(|| panic!("{what}: expected registers, got {outcome}"));
    words.iter().map(|word| word.as_u64().and_then(|w| u16::try_from(w).ok()).expect("a register is a u16")).collect()
}

fn exception_code(outcome: &Value, what: &str) -> u64 {
    outcome
        .get("exception")
        .and_then(Value::as_u64)
        .unwrap_or_else(|| panic!("{what}: expected an exception, got {outcome}"))
}

fn run_client(args: &[&str]) -> Result<Value> {
    let mut command: Command = python_peer("read_sim.py");
    command.args(args).arg("--plan").arg(plan_json());
    let Finished { status, stdout, stderr } = run_to_end("read_sim.py", command)?;
    if !status.success() {
        bail!("read_sim.py failed ({status}):\n{stdout}\n{stderr}");
    }
    serde_json::from_str(stdout.trim()).with_context(|| format!("read_sim.py output is not JSON:\n{stdout}\n{stderr}"))
}

/// The checks both transports share, against the register map in the simulator's contract.
fn check_report(report: &Value) {
    for unit in UNITS {
        let (averaging, tag) = plan_for(unit);
        let got = &report["units"][unit.to_string()];
        let what = |part: &str| format!("unit {unit} {part}");

        let input = registers(&got["input"], &what("FC04 0..8"));
        assert_eq!(input.len(), 8, "{}", what("FC04 count"));
        // Input 0–1 displacement and 2–3 load are i32, high word first.
        let displacement_0p1um = i32_high_word_first(input[0], input[1]);
        let load_0p1n = i32_high_word_first(input[2], input[3]);
        let temperature_0p01c = input[4] as i16;
        let samples = u32_high_word_first(input[6], input[7]);
        assert!(plausible::LOAD_0P1N.contains(&load_0p1n), "{}: load {load_0p1n} × 0.1 N", what("FC04"));
        assert!(
            plausible::DISPLACEMENT_0P1UM.contains(&displacement_0p1um),
            "{}: displacement {displacement_0p1um} × 0.1 µm",
            what("FC04")
        );
        assert!(
            plausible::TEMPERATURE_0P01C.contains(&temperature_0p01c),
            "{}: temperature {temperature_0p01c} × 0.01 °C",
            what("FC04")
        );

        let holding = registers(&got["holding"], &what("FC03 0..9"));
        assert_eq!(holding.len(), 9, "{}", what("FC03 count"));
        assert!((1..=64).contains(&holding[0]), "{}: averaging count {}", what("FC03"), holding[0]);

        // Holding 100–107 mirror input 0–7; read later, so its sample counter cannot be behind.
        let mirror = registers(&got["mirror"], &what("FC03 100..108"));
        assert_eq!(mirror.len(), 8, "{}", what("mirror count"));
        let mirror_load_0p1n = i32_high_word_first(mirror[2], mirror[3]);
        assert!(plausible::LOAD_0P1N.contains(&mirror_load_0p1n), "{}: load {mirror_load_0p1n}", what("mirror"));
        assert!(
            u32_high_word_first(mirror[6], mirror[7]) >= samples,
            "{}: mirror sample counter behind input counter {samples}",
            what("mirror")
        );

        // FC06 echoes address and value (Modbus Application Protocol V1.1b3 §6.6).
        assert_eq!(got["write_single"]["address"], 0, "{}", what("FC06 echo address"));
        assert_eq!(registers(&got["write_single"], &what("FC06 echo")), [averaging], "{}", what("FC06 echo value"));
        // FC16 echoes address and quantity (V1.1b3 §6.12).
        assert_eq!(got["write_multiple"]["address"], 1, "{}", what("FC16 echo address"));
        assert_eq!(got["write_multiple"]["count"], 8, "{}", what("FC16 echo quantity"));

        // Both sides pack the tag the same way, then it reads back as written.
        let tag_words = ascii_words(&tag, 8);
        let mut expected = vec![averaging];
        expected.extend_from_slice(&tag_words);
        let packed_by_peer: Vec<u16> = got["tag_words"]
            .as_array()
            .expect("tag_words")
            .iter()
            .map(|w| w.as_u64().and_then(|w| u16::try_from(w).ok()).expect("u16"))
            .collect();
        assert_eq!(packed_by_peer, tag_words, "{}", what("tag packing"));
        assert_eq!(registers(&got["holding_after"], &what("read-back")), expected, "{}", what("read-back"));

        // The register map: unmapped addresses are 02, writes to the mirror are 02, an averaging count
        // of 0 or above 64 is 03 (V1.1b3 §7 exception codes).
        let exceptions = &got["exceptions"];
        for (case, code) in [
            ("read_holding_unmapped", 2),
            ("read_holding_past_tag", 2),
            ("read_input_unmapped", 2),
            ("write_mirror", 2),
            ("write_averaging_zero", 3),
            ("write_averaging_65", 3),
        ] {
            assert_eq!(exception_code(&exceptions[case], &what(case)), code, "{}", what(case));
        }
        // A refused write leaves the register as it was.
        assert_eq!(registers(&got["holding_final"], &what("after refused writes")), [averaging]);
        // Read after every unit was written: each unit kept its own values.
        assert_eq!(registers(&got["holding_end"], &what("at the end")), expected, "{}", what("at the end"));
    }
}

// Peer: pymodbus 3.16.1 ModbusTcpClient; spec: Modbus Messaging on TCP/IP V1.0b.
#[test]
fn pymodbus_client_reads_and_writes_the_simulator_over_tcp() -> Result<()> {
    let simulator = Simulator::start_tcp(&[])?;
    let address = simulator.tcp_addr()?.to_string();
    let report = run_client(&["--tcp", &address])?;
    check_report(&report);
    Ok(())
}

// Peer: pymodbus 3.16.1 ModbusSerialClient over a socat pty pair; spec: Modbus over Serial Line V1.02.
#[test]
fn pymodbus_client_reads_and_writes_the_simulator_over_rtu() -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let _simulator = Simulator::start_rtu(&line.device_end, &[])?;
    let master_end = line.master_end.to_string_lossy().to_string();
    let report = run_client(&["--rtu", &master_end, "--parity", "N", "--silent-unit", "9"])?;
    check_report(&report);
    // Unit 9 has no frame (four by default): on a serial line an unaddressed device stays silent
    // (Modbus over Serial Line V1.02 §2.2), so pymodbus must time out rather than get an exception.
    assert_eq!(report["silent_unit"]["no_reply"], true, "unit 9 on RTU: {}", report["silent_unit"]);
    Ok(())
}
