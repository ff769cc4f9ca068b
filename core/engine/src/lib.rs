//! beamproof-engine: reads and checks campaigns, reads dose files, runs analyses and writes
//! checksummed run folders.

pub mod archive;
pub mod campaign;
pub mod campaign_film;
pub mod checksum;
pub mod compare;
pub mod diag;
pub mod film;
pub mod input_store;
pub mod leftovers;
pub mod mu_input;
pub mod output;
pub mod prepare;
pub mod readers;
pub mod registry;
pub mod run;
pub mod signing;
pub mod yaml;
