//! Simulated conduit worlds (in progress).
pub mod friction;
pub mod geometry;
pub mod network;
pub mod nozzle;
pub mod rng;
pub mod vec3;
