//! Simulated conduit worlds (in progress).
pub mod demos;
pub mod friction;
pub mod geometry;
pub mod network;
pub mod nozzle;
pub mod rng;
pub mod scenario;
pub mod vec3;
pub mod world;
