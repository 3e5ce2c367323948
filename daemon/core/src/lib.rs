//! oedolog-core: what oedolog computes, with nothing of how it runs. The reduction of an oedometer test
//! (phase relations, Terzaghi theory, the Taylor and Casagrande time-curve constructions, cv, Cα, the
//! e–log σ′ curve with Cc, Cr and σ′p), the live watch's per-frame engine, the alarm engine and the file
//! reductions behind `oedolog analyze`.
//!
//! Pure: no async runtime, no database, no HTTP, no serial port, no clock reads. Times come in with the
//! samples; files are read by the caller. Methods, formulas and check values cite `REFERENCES.md` beside
//! this crate by anchor (`[ref: <anchor>]`). Results are proposals for a qualified engineer to review.

#![deny(missing_docs)]

pub mod alarms;
pub mod analysis;
pub mod diagnostics;
pub mod offline;
pub mod quantity;
pub mod replay;
pub mod units;
pub mod watch;
