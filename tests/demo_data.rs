//! The committed demo data are exactly what the demo generator writes: regenerate into a
//! scratch folder and compare every file byte for byte, and the file lists both ways.

use crate::support::{root, scratch};

#[test]
fn committed_demo_data_equal_a_fresh_generation() {
    let fresh = scratch("demo-data").join("data");
    let written = beamproof_demo_gen::generate(&fresh).expect("generator runs");
    let committed = root().join("demo-campaign/data");
    let mut listed: Vec<String> = walkdir::WalkDir::new(&committed)
        .into_iter()
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .map(|e| beamproof_engine::checksum::relative_slash(&committed, e.path()))
        .collect();
    listed.sort();
    let mut made: Vec<String> = written
        .iter()
        .map(|p| beamproof_engine::checksum::relative_slash(&fresh, p))
        .collect();
    made.sort();
    assert_eq!(
        listed, made,
        "demo-campaign/data holds other files than the generator writes"
    );
    for rel in &made {
        assert!(
            std::fs::read(fresh.join(rel)).expect("fresh")
                == std::fs::read(committed.join(rel)).expect("committed"),
            "{rel} differs from a fresh generation: run `cargo run -p beamproof-demo-gen` and commit"
        );
    }
}
