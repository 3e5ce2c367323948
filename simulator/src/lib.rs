//! `oedolog-sim`: emulates oedometer loading frames as Modbus devices, for demos and tests.
//!
//! Each frame holds a specimen of the demo scenario ([`scenario`]) whose settlement follows the
//! forward model ([`physics`]: e–log σ′ compression, exact Terzaghi primary consolidation, secondary
//! compression), read through instruments with resolution and noise ([`sensors`]), exposed as a Modbus
//! unit ([`device`]) over TCP or RTU ([`server`]), with switchable faults ([`faults`]), optional RS-485 wire timing ([`line`]) and a
//! control line protocol ([`control`]). Time comes from a [`clock::Clock`] the caller supplies.
//!
//! The forward model is written independently of the daemon's analysis on purpose: each checks the other.

pub mod clock;
pub mod control;
pub mod device;
pub mod faults;
pub mod line;
pub mod physics;
pub mod scenario;
pub mod sensors;
pub mod server;
