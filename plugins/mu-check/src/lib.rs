//! The independent monitor-unit check (AAPM TG-71). This crate holds the calculation core:
//! validated beam-data tables with bilinear interpolation (`tables`), and the TG-71 SSD and
//! SAD formalism with its field-size helpers (`formalism`). The campaign plugin, the beam-data
//! file format, Clarkson integration and DICOM RT Plan input build on it.

pub mod beam;
pub mod clarkson;
pub mod formalism;
pub mod tables;
