//! The control line protocol: one command per line (stdin of `oedolog-sim`), one answer line each.
//!
//! ```text
//! apply UNIT STRESS_KPA          load change now (the tests' stand-in for the technician)
//! fault UNIT|all KIND VALUE      KIND: drop delay bad-crc noise split exception disconnect (0..1), stuck travel (on/off)
//! reseat UNIT [READING_MM]       the technician re-seats the gauge (default reading 1.0 mm)
//! state [UNIT]                   one JSON object per frame: readings' truth, running increment, faults
//! time                           the simulated time
//! help                           this list
//! ```
//! Answers start with `ok `, `error: ` or are JSON (`state`). Nothing here touches a port.

use oedolog_protocol::UnitId;
use serde_json::json;

use crate::faults::{FaultKind, FaultSetting};
use crate::server::Shared;

/// The command list printed by `help`.
pub const HELP: &str = "commands: apply UNIT STRESS_KPA | fault UNIT|all KIND VALUE | reseat UNIT [READING_MM] | state [UNIT] | time | help";

fn unit(word: Option<&str>) -> Result<UnitId, String> {
    let word = word.ok_or("missing UNIT (1..=247)")?;
    word.parse::<u8>()
        .ok()
        .filter(|u| (1..=247).contains(u))
        .map(UnitId)
        .ok_or(format!("UNIT `{word}`: allowed 1..=247"))
}

fn number(word: Option<&str>, field: &str) -> Result<f64, String> {
    let word = word.ok_or(format!("missing {field}"))?;
    word.parse::<f64>().ok().filter(|v| v.is_finite()).ok_or(format!("{field} `{word}`: not a number"))
}

/// Executes one control line against the simulation and returns the answer (possibly several lines).
pub fn execute(line: &str, shared: &Shared) -> String {
    match run(line, shared) {
        Ok(answer) => answer,
        Err(error) => format!("error: {error}"),
    }
}

fn run(line: &str, shared: &Shared) -> Result<String, String> {
    let mut words = line.split_whitespace();
    let at_s = shared.clock.now_s();
    match words.next() {
        None => Ok(String::new()),
        Some("apply") => {
            let unit = unit(words.next())?;
            let stress_kpa = number(words.next(), "STRESS_KPA")?;
            shared.with(|sim| {
                let frame = sim.frame_mut(unit).ok_or(format!("no frame with unit id {unit}"))?;
                frame.apply_stress(stress_kpa, at_s).map_err(|e| e.to_string())
            })?;
            Ok(format!("ok apply unit={unit} stress_kpa={stress_kpa} onset_s={at_s:.3}"))
        }
        Some("fault") => {
            let target = words.next().ok_or("missing UNIT or `all`")?;
            let unit = if target == "all" { None } else { Some(unit(Some(target))?) };
            let kind: FaultKind = words.next().ok_or("missing KIND")?.parse()?;
            let setting = FaultSetting::parse_value(kind, words.next().ok_or("missing VALUE")?)?;
            shared.with(|sim| sim.set_fault(unit, setting))?;
            Ok(format!("ok fault {target} {kind}={}", setting.value))
        }
        Some("reseat") => {
            let unit = unit(words.next())?;
            let reading_mm = match words.next() {
                Some(word) => number(Some(word), "READING_MM")?,
                None => 1.0,
            };
            let jump_mm = shared.with(|sim| {
                sim.frame_mut(unit).ok_or(format!("no frame with unit id {unit}"))?.reseat_gauge(reading_mm, at_s)
            })?;
            Ok(format!("ok reseat unit={unit} jump_mm={jump_mm:.4} at_s={at_s:.3}"))
        }
        Some("state") => {
            let only = words.next().map(|w| unit(Some(w))).transpose()?;
            let lines: Vec<String> = shared.with(|sim| {
                sim.frames()
                    .iter()
                    .filter(|f| only.is_none_or(|u| f.unit() == u))
                    .map(|f| {
                        let model = f.model();
                        let faults = f.faults();
                        json!({
                            "unit": f.unit().0,
                            "specimen": model.specimen().id,
                            "at_s": at_s,
                            "stress_kpa": model.stress_kpa(at_s),
                            "displacement_mm": model.displacement_mm(at_s),
                            "height_mm": model.height_mm(at_s),
                            "void_ratio": model.void_ratio(at_s),
                            "increment": model.current_increment(),
                            "increments": model.increments().len(),
                            "faults": {
                                "drop": faults.drop, "delay": faults.delay, "bad_crc": faults.bad_crc,
                                "noise": faults.noise, "split": faults.split, "exception": faults.exception,
                                "disconnect": faults.disconnect, "stuck": faults.stuck, "travel": faults.travel,
                            },
                        })
                        .to_string()
                    })
                    .collect()
            });
            if lines.is_empty() { Err("no such frame".into()) } else { Ok(lines.join("\n")) }
        }
        Some("time") => Ok(format!("ok time at_s={at_s:.3}")),
        Some("help") => Ok(HELP.to_string()),
        Some(other) => Err(format!("unknown command `{other}`; {HELP}")),
    }
}

#[cfg(test)]
mod tests {
    use std::sync::Arc;

    use super::*;
    use crate::clock::ManualClock;
    use crate::device::Simulation;

    fn shared() -> (Arc<Shared>, Arc<ManualClock>) {
        let clock = Arc::new(ManualClock::new(100.0));
        (Shared::new(Simulation::demo(2, 0.0, false, 3).unwrap(), clock.clone()), clock)
    }

    #[test]
    fn apply_starts_an_increment_at_the_current_time() {
        let (shared, clock) = shared();
        assert_eq!(execute("apply 2 25", &shared), "ok apply unit=2 stress_kpa=25 onset_s=100.000");
        clock.advance(60.0);
        let state: serde_json::Value = serde_json::from_str(&execute("state 2", &shared)).unwrap();
        assert_eq!(state["increment"]["onset_s"], 100.0);
        assert_eq!(state["increment"]["to_kpa"], 25.0);
        assert!(state["displacement_mm"].as_f64().unwrap() > 0.0);
    }

    #[test]
    fn bad_lines_get_errors_naming_what_is_allowed_and_change_nothing() {
        let (shared, _) = shared();
        assert_eq!(execute("apply 0 25", &shared), "error: UNIT `0`: allowed 1..=247");
        assert_eq!(execute("apply 9 25", &shared), "error: no frame with unit id 9");
        assert_eq!(execute("apply 1 lots", &shared), "error: STRESS_KPA `lots`: not a number");
        assert!(execute("fault 1 fire 0.1", &shared).starts_with("error: unknown fault `fire`"));
        assert!(execute("fault all drop 2", &shared).contains("allowed: 0 to 1"));
        assert!(execute("launch", &shared).starts_with("error: unknown command `launch`"));
        let state: serde_json::Value = serde_json::from_str(&execute("state 1", &shared)).unwrap();
        assert_eq!(state["increments"], 0);
        assert_eq!(state["faults"]["drop"], 0.0);
    }

    #[test]
    fn fault_and_reseat_lines_take_effect() {
        let (shared, _) = shared();
        assert_eq!(execute("fault all drop 0.5", &shared), "ok fault all drop=0.5");
        assert_eq!(execute("fault 2 stuck on", &shared), "ok fault 2 stuck=1");
        let state = execute("state", &shared);
        let frames: Vec<serde_json::Value> = state.lines().map(|l| serde_json::from_str(l).unwrap()).collect();
        assert_eq!(frames.len(), 2);
        assert_eq!(frames[0]["faults"]["drop"], 0.5);
        assert_eq!(frames[1]["faults"]["stuck"], true);
        assert!(execute("reseat 1 2.5", &shared).starts_with("ok reseat unit=1 jump_mm=1.5000"));
    }
}
