//! Coverage-guided fuzz target: any bytes, written to a file, through `read_cloud`. A panic,
//! an abort or an error that is not one line naming the file is a finding. Seed the corpus
//! with tests/data and tests/data/malformed:
//! `cargo +nightly fuzz run read_cloud fuzz/corpus/read_cloud ../tests/data/las ../tests/data/ply`.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let dir = std::env::temp_dir().join(format!("equiscan-fuzz-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join("input");
    std::fs::write(&path, data).unwrap();
    match equiscan::io::read_cloud(&path) {
        Ok((cloud, _)) => cloud.validate().unwrap(),
        Err(e) => {
            let m = e.to_string();
            assert!(!m.contains('\n') && m.starts_with(&path.display().to_string()), "{m}");
        }
    }
});
