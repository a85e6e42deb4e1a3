//! dosemill engine: photon transport physics, sources, scoring, decks, HDF5 output and the CLI.
//!
//! Secondary electrons are not transported: their energy is deposited at the interaction point
//! (kerma approximation). See README for where this holds.

pub mod benchmarks;
pub mod cli;
pub mod deck;
pub mod output;
pub mod physics;
pub mod protocol;
pub mod report;
pub mod rng;
pub mod runstate;
pub mod raytrace;
pub mod results;
pub mod score;
pub mod setup;
pub mod source;
pub mod spectrum;
pub mod transport;
pub mod validation;
