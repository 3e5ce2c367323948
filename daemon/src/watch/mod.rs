//! The live watch: per frame, the increment lifecycle and end-of-primary detection as readings arrive.
//! [`frame`] is the pure state machine; the hub that feeds it and persists its notes comes with the
//! daemon's wiring.

pub mod frame;

pub use frame::{
    EopRule, FrameWatch, Note, OnsetSource, Phase, Reseat, Specimen, WatchError, WatchParams, WatchStatus,
};
