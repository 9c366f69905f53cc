//! Coverage-guided fuzz target: the chunked point source must agree with `read_cloud` on
//! every input (both refuse, or the joined chunks equal the cloud).
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let dir = std::env::temp_dir().join(format!("equiscan-fuzz-src-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join("input");
    std::fs::write(&path, data).unwrap();
    let whole = equiscan::io::read_cloud(&path);
    let streamed = equiscan::io::PointSource::open(&path).and_then(|mut s| {
        let mut c = s.empty_cloud(0);
        while s.read_into(&mut c, 61)? > 0 {}
        Ok(c)
    });
    match (whole, streamed) {
        (Ok((a, _)), Ok(b)) => assert_eq!(format!("{a:?}"), format!("{b:?}")),
        (Err(_), Err(_)) => {}
        (a, b) => panic!("read_cloud and the point source disagree: {:?} / {:?}", a.err(), b.err()),
    }
});
