//! beamproof-engine: reads and checks campaigns, reads dose files, runs analyses and writes
//! checksummed run folders.

pub mod diag;
pub mod yaml;
pub mod campaign;
pub mod readers;
pub mod checksum;
pub mod registry;
pub mod prepare;
pub mod output;
pub mod run;
