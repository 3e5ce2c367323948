//! The live watch: per frame, the increment lifecycle and end-of-primary detection as readings arrive.
//! [`frame`] is the pure state machine; [`hub`] feeds it from acquisition, persists what it decides and
//! takes operator actions.

#[cfg(test)]
mod clock_tests;
#[cfg(test)]
mod frame_tests;
pub mod hub;
#[cfg(test)]
mod hub_tests;

pub use hub::{Hub, HubError};
pub use oedolog_core::watch::{
    EopRule, Finding, FrameWatch, OnsetSource, Phase, ReadyLine, Reseat, SpecimenSize, WatchError, WatchParams,
    WatchStatus,
};
