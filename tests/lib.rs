//! Package holding beamproof's single integration-test binary (`main.rs` and its modules).
//! One binary, because every test binary that links typst is a large, slow link.
