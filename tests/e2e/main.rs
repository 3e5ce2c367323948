//! oedolog's end-to-end tests: one integration binary, one module per area.
//!
//! Each suite runs real processes (the workspace binaries, socat, mbpoll, pymodbus scripts) and must
//! not skip when a peer is missing: `oedolog_tests` panics with what to install instead.

mod analyze;
mod api;
mod daemon;
mod demo_truth;
mod flood;
mod peers_mbpoll;
mod peers_pymodbus;
mod protocol_vs_pymodbus;
mod sim_line_timing;
mod soak;
mod util_selftest;
