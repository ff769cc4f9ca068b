//! The independent monitor-unit check (AAPM TG-71): validated beam-data tables (`tables`), the
//! TG-71 SSD and SAD formalism with its field-size helpers (`formalism`), factors looked up for
//! a beam (`beam`), Clarkson sector integration for irregular apertures (`clarkson`), and the
//! `mu-check` analysis that compares the planning system's dose with the independent one.

pub mod beam;
pub mod clarkson;
pub mod formalism;
mod plugin;
pub mod tables;

pub use plugin::{
    BeamCheck, MuCheck, NAME, Scatter, beam_data, calculate_beam, check_beam, default_levels,
};
