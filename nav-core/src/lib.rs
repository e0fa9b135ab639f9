//! Upcurrent navigation core.
//!
//! Onboard code for a conduit-crawling robot: it turns multi-hole probe port
//! pressures and skin contacts into flow and wall estimates, keeps a bounded
//! local map, and decides where to go next.
//!
//! The entry point is [`onboard::FrameNavigator`] (sensor frames in,
//! commands out); [`onboard::DemoFrameNavigator`] names the demo robots'
//! capacities. Every error type implements [`core::fmt::Display`].
//!
//! Features: `std` (default, host-only extras: the kiddo wall index and
//! calibration-table building) and `serde`. The embedded build is
//! `default-features = false`: `no_std`, no `alloc`.
//!
//! Rules this crate keeps (see `DEVELOPERS.md`):
//! - `#![no_std]`, no `alloc`; every capacity is a const generic or
//!   caller-provided storage.
//! - No panics in non-test code: no `unwrap`, `expect`, `panic!`, unchecked
//!   indexing, or `as` casts that can wrap. Errors are typed enums.
//! - Every iterative solver has an iteration cap; there is no recursion.
//! - All transcendental maths goes through [`libm`] so host and target
//!   compute the same bits.
#![no_std]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::cast_possible_truncation,
        clippy::cast_possible_wrap,
        clippy::cast_sign_loss,
        clippy::unreachable,
        clippy::todo,
        clippy::unimplemented,
    )
)]
#![forbid(unsafe_code)]

#[cfg(feature = "std")]
extern crate std;

pub mod body;
pub mod decide;
pub mod digest;
mod display;
pub mod flow_turn;
pub mod flow_window;
pub mod frame;
pub mod gas;
pub mod health;
pub mod map;
pub mod navigator;
pub mod num;
pub mod onboard;
pub mod probe;
pub mod ridge;
pub mod tactile;
pub mod trust;
