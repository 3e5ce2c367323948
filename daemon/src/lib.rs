//! oedolog: the daemon's library. `main.rs` only parses the command line and wires these together.
//!
//! Data flows one way: `acquire` (bus tasks) → `store` (one writer) → `watch` → `analysis` → `http`.

pub mod acquire;
pub mod alarms;
pub mod analyze;
pub mod clock;
pub mod config;
pub mod demo;
pub mod fleet;
pub mod http;
pub mod lab;
pub mod logging;
pub mod notify;
pub mod publish;
pub mod service;
pub mod store;
pub mod watch;
