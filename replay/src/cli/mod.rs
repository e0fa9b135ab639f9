//! The commands of the `replay` binary: one module each, holding the
//! command's arguments (parsed and checked by clap before the command
//! runs) and one function that does the work through the library and
//! writes through [`out::Out`].

pub mod campaign;
pub mod demo;
pub mod diff;
pub mod generate;
pub mod import;
pub mod inspect;
pub mod merge;
pub mod out;
pub mod plot;
pub mod run;
pub mod scenarios;
pub mod scorecard;
pub mod world;
