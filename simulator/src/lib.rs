//! placeholder
pub mod physics;
pub mod scenario;
pub mod sensors;
