//! Mutation-based fuzzing in CI (stable Rust, no coverage feedback): a seeded mutator of our
//! own turns small valid files (tests/data and small versions of the demo scans written by our
//! own writers) into hostile ones by byte flips, byte overwrites, truncations, splices of other
//! files, header-field edits at the LAS header offsets and in PLY header lines, and numeric
//! extremes (NaN, ±inf, 1e300, f32::MAX, 0xFFFFFFFF) in the data. Every input goes through
//! `read_cloud` and the point source (chunks joined must equal the cloud); accepted tiny
//! clouds go through the descriptor engine (`features`' entry point) and some through
//! `align_pair`. A panic (caught per input), an error that is not one line naming the file, a
//! source that disagrees with `read_cloud`, or a non-finite feature value is a failure,
//! reported with the seed that reproduces it:
//! `EQUISCAN_FUZZ_SEED=<seed> cargo test --release --test io_fuzz -- --nocapture`.
//! `EQUISCAN_FUZZ_INPUTS=<n>` changes the number of inputs (default 20 000). The coverage-guided
//! counterpart (libFuzzer through `cargo fuzz`, nightly) lives in fuzz/.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

use equiscan::Cloud;
use equiscan::descriptor::{Centres, Engine, Recipe};
use equiscan::io::{LasOptions, PointSource, read_cloud, write_las, write_las_with, write_ply};
use equiscan::so3::rng::SplitMix64;

fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// Small valid inputs: (name, bytes).
fn seeds(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out = Vec::new();
    for rel in [
        "tests/data/las/autzen.las",
        "tests/data/las/autzen.laz",
        "tests/data/las/equiscan_extra_bytes.las",
        "tests/data/ply/cube_ascii.ply",
        "tests/data/ply/cube_binary_little_endian.ply",
        "tests/data/ply/cube_binary_big_endian.ply",
        "tests/data/ply/cube_colour_edges_ascii.ply",
        "tests/data/ply/cube_colour_edges_binary_little_endian.ply",
    ] {
        out.push((rel.to_string(), std::fs::read(repo(rel)).unwrap()));
    }
    // Small versions of the demo scans, written by our own writers: the first 300 points.
    let take = |c: &Cloud, n: usize| {
        let mut s = c.clone();
        let n = n.min(c.len());
        s.positions.truncate(n);
        for v in [&mut s.intensity].into_iter().flatten() {
            v.truncate(n);
        }
        if let Some(v) = s.color.as_mut() {
            v.truncate(n);
        }
        if let Some(v) = s.normals.as_mut() {
            v.truncate(n);
        }
        if let Some(v) = s.classification.as_mut() {
            v.truncate(n);
        }
        if let Some(v) = s.return_number.as_mut() {
            v.truncate(n);
        }
        if let Some(v) = s.gps_time.as_mut() {
            v.truncate(n);
        }
        if let Some(r) = s.records.as_mut() {
            r.bytes.truncate(n * r.record_len);
        }
        s
    };
    let (depot, info) = read_cloud(&repo("scans/depot_station1.laz")).unwrap();
    let depot = take(&depot, 300);
    let (part, _) = read_cloud(&repo("scans/parts/tray/nut_scan.ply")).unwrap();
    let part = take(&part, 300);
    let col: Vec<f32> = (0..300).map(|i| i as f32 * 0.5).collect();
    let cols = [equiscan::io::Column::new("f", &col)];
    let mut write = |name: &str, f: &dyn Fn(&Path)| {
        let p = dir.join(name);
        f(&p);
        out.push((name.to_string(), std::fs::read(&p).unwrap()));
    };
    write("depot.laz", &|p| {
        write_las_with(p, &depot, &[], &LasOptions::like(&info)).unwrap()
    });
    write("depot.las", &|p| write_las(p, &depot, &cols).unwrap());
    write("depot_fmt1.las", &|p| {
        let mut o = LasOptions::default();
        o.point_format = Some(1);
        write_las_with(p, &depot, &[], &o).unwrap()
    });
    write("part.ply", &|p| write_ply(p, &part, &cols).unwrap());
    write("part_ascii.ply", &|p| {
        let mut t = format!(
            "ply\nformat ascii 1.0\ncomment small\nelement vertex {}\nproperty float x\nproperty float y\nproperty float z\nelement face 1\nproperty list uchar int vertex_indices\nend_header\n",
            part.len()
        );
        for q in &part.positions {
            t += &format!("{} {} {}\n", q[0], q[1], q[2]);
        }
        t += "3 0 1 2\n";
        std::fs::write(p, t).unwrap()
    });
    out
}

const LAS_FIELDS: [(usize, usize); 24] = [
    (24, 1),
    (25, 1),
    (94, 2),
    (96, 4),
    (100, 4),
    (104, 1),
    (105, 2),
    (107, 4),
    (111, 4),
    (131, 8),
    (139, 8),
    (147, 8),
    (155, 8),
    (163, 8),
    (171, 8),
    (179, 8),
    (187, 8),
    (195, 8),
    (203, 8),
    (211, 8),
    (219, 8),
    (235, 8),
    (247, 8),
    (255, 8),
];

fn extreme(r: &mut SplitMix64, size: usize) -> Vec<u8> {
    match size {
        8 => {
            let v = [
                f64::NAN,
                f64::INFINITY,
                -f64::INFINITY,
                1e300,
                -1e300,
                0.0,
                -0.0,
                f64::MIN_POSITIVE,
                f32::MAX as f64,
                1e30,
            ];
            if r.below(3) == 0 {
                let w = [
                    0u64,
                    1,
                    u32::MAX as u64,
                    u64::MAX,
                    1 << 40,
                    1_000_000_000_000,
                ];
                w[r.below(w.len() as u64) as usize].to_le_bytes().to_vec()
            } else {
                v[r.below(v.len() as u64) as usize].to_le_bytes().to_vec()
            }
        }
        4 => {
            if r.below(2) == 0 {
                let w = [0u32, 1, 2, 0x7FFF_FFFF, u32::MAX, 227, 375, 1 << 20];
                w[r.below(w.len() as u64) as usize].to_le_bytes().to_vec()
            } else {
                let v = [f32::NAN, f32::INFINITY, f32::MAX, -f32::MAX, 3e38, 1e-45];
                v[r.below(v.len() as u64) as usize].to_le_bytes().to_vec()
            }
        }
        2 => [0u16, 1, 0xFFFF, 227, 375][r.below(5) as usize]
            .to_le_bytes()
            .to_vec(),
        _ => vec![[0u8, 1, 4, 5, 10, 11, 99, 0x86, 0xFF][r.below(9) as usize]],
    }
}

/// Edits one PLY header line: a number made extreme, a line duplicated or dropped.
fn ply_header_edit(r: &mut SplitMix64, b: &mut Vec<u8>) {
    let Some(end) = b.windows(11).position(|w| w == b"end_header\n") else {
        return;
    };
    let head = String::from_utf8_lossy(&b[..end]).into_owned();
    let mut lines: Vec<String> = head.lines().map(String::from).collect();
    if lines.len() < 2 {
        return;
    }
    let i = 1 + r.below(lines.len() as u64 - 1) as usize;
    match r.below(4) {
        0 => {
            let words = [
                "0",
                "-1",
                "4294967295",
                "1000000000000",
                "nan",
                "double",
                "list",
                "vertex",
                "x",
                "binary_big_endian",
            ];
            let mut ws: Vec<&str> = lines[i].split(' ').collect();
            let k = r.below(ws.len() as u64) as usize;
            ws[k] = words[r.below(words.len() as u64) as usize];
            lines[i] = ws.join(" ");
        }
        1 => {
            let l = lines[i].clone();
            lines.insert(i, l);
        }
        2 => {
            lines.remove(i);
        }
        _ => lines.insert(i, "element junk 1000000000000".into()),
    }
    let mut out = lines.join("\n").into_bytes();
    out.push(b'\n');
    out.extend_from_slice(&b[end..]);
    *b = out;
}

fn mutate(r: &mut SplitMix64, seeds: &[(String, Vec<u8>)]) -> (usize, Vec<u8>) {
    let which = r.below(seeds.len() as u64) as usize;
    let mut b = seeds[which].1.clone();
    let ops = 1 + r.below(3);
    for _ in 0..ops {
        if b.is_empty() {
            break;
        }
        let len = b.len() as u64;
        // Half of the positions fall in the first 400 bytes (the headers).
        let pos = |r: &mut SplitMix64| {
            if r.below(2) == 0 {
                r.below(len.min(400)) as usize
            } else {
                r.below(len) as usize
            }
        };
        match r.below(8) {
            0 => {
                let p = pos(r);
                b[p] ^= 1 << r.below(8);
            }
            1 => {
                let p = pos(r);
                b[p] = [0u8, 0xFF, 0x7F, 0x80, b' ', b'\n'][r.below(6) as usize];
            }
            2 => {
                let cut = r.below(len + 1) as usize;
                b.truncate(cut);
            }
            3 => {
                // Splice: a piece of another seed over or into this one.
                let other = &seeds[r.below(seeds.len() as u64) as usize].1;
                let from = r.below(other.len() as u64) as usize;
                let n = (r.below(64) as usize + 1).min(other.len() - from);
                let at = pos(r);
                if r.below(2) == 0 {
                    let end = (at + n).min(b.len());
                    b[at..end].copy_from_slice(&other[from..from + (end - at)]);
                } else {
                    b.splice(at..at, other[from..from + n].iter().copied());
                }
            }
            4 if b.starts_with(b"LASF") => {
                let (off, size) = LAS_FIELDS[r.below(LAS_FIELDS.len() as u64) as usize];
                if off + size <= b.len() {
                    let v = extreme(r, size);
                    b[off..off + size].copy_from_slice(&v);
                }
            }
            4 | 5 if b.starts_with(b"ply") => ply_header_edit(r, &mut b),
            5 if b.len() > 1000 => {
                // LAZ chunk table: the offset at the start of the point data, or its count.
                let otp = u32::from_le_bytes(b[96..100].try_into().unwrap()) as usize;
                if otp + 8 <= b.len() {
                    let v = extreme(r, 8);
                    b[otp..otp + 8].copy_from_slice(&v);
                }
            }
            _ => {
                // A numeric extreme somewhere in the data, 4- or 8-byte aligned.
                let size = if r.below(2) == 0 { 4 } else { 8 };
                let p = (pos(r) / size) * size;
                if p + size <= b.len() {
                    let v = extreme(r, size);
                    b[p..p + size].copy_from_slice(&v);
                }
            }
        }
    }
    (which, b)
}

fn check_error(path: &Path, e: &equiscan::Error) -> Result<(), String> {
    let m = e.to_string();
    if m.contains('\n') || !m.starts_with(&format!("{}: ", path.display())) || !m.contains("; ") {
        return Err(format!("badly formed error: {m:?}"));
    }
    Ok(())
}

/// One input through every entry point; Err describes a failure.
fn run_one(path: &Path, tiny: bool, align: bool) -> Result<(), String> {
    let read = read_cloud(path);
    let streamed = PointSource::open(path).and_then(|mut s| {
        let mut c = s.empty_cloud(0);
        while s.read_into(&mut c, 97)? > 0 {}
        Ok(c)
    });
    match (&read, &streamed) {
        (Err(e), Err(f)) => {
            check_error(path, e)?;
            check_error(path, f)?;
            return Ok(());
        }
        // Compared through their Debug text: NaN attributes (GPS time) equal themselves there.
        (Ok((c, _)), Ok(s)) if format!("{c:?}") == format!("{s:?}") => {}
        (Ok(_), Ok(_)) => return Err("point source and read_cloud disagree".into()),
        (Ok(_), Err(e)) => return Err(format!("only the point source refused: {e}")),
        (Err(e), Ok(_)) => return Err(format!("only read_cloud refused: {e}")),
    }
    let (cloud, _) = read.unwrap();
    cloud
        .validate()
        .map_err(|e| format!("invalid cloud: {e}"))?;
    if tiny && !cloud.is_empty() && cloud.len() <= 400 {
        let recipe = Recipe::builder()
            .radius(2.0)
            .degree(2)
            .shells(2)
            .build()
            .unwrap();
        if let Ok(f) = Engine::new(recipe).compute(&cloud, &Centres::All)
            && f.values.iter().any(|v| !v.is_finite())
        {
            // A finite cloud within the accepted extent gives finite invariants.
            return Err("non-finite feature value".into());
        }
    }
    if align && cloud.len() >= 10 && cloud.len() <= 400 {
        let p = equiscan::align::AlignParams {
            ransac_iterations: 200,
            refine_best: 2,
            ..Default::default()
        };
        let _ = equiscan::align::align_pair(&cloud, &cloud, &p);
    }
    Ok(())
}

#[test]
fn mutated_inputs_never_panic_and_give_one_line_errors() {
    let dir = tempfile::tempdir().unwrap();
    let seeds = seeds(dir.path());
    let total: usize = std::env::var("EQUISCAN_FUZZ_INPUTS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(20_000);
    let only: Option<u64> = std::env::var("EQUISCAN_FUZZ_SEED")
        .ok()
        .and_then(|v| v.parse().ok());
    let inputs: Vec<u64> = match only {
        Some(s) => vec![s],
        None => (0..total as u64).collect(),
    };
    let next = AtomicUsize::new(0);
    let accepted = AtomicUsize::new(0);
    let failures = Mutex::new(Vec::new());
    let threads = std::thread::available_parallelism()
        .map_or(2, |n| n.get())
        .min(4);
    let t0 = std::time::Instant::now();
    std::thread::scope(|s| {
        for t in 0..threads {
            let (next, accepted, failures, seeds, inputs) =
                (&next, &accepted, &failures, &seeds, &inputs);
            let path_dir = dir.path().to_path_buf();
            s.spawn(move || {
                loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    if i >= inputs.len() {
                        break;
                    }
                    let seed = inputs[i];
                    let mut r = SplitMix64::new(seed ^ 0x5EED_F422);
                    let (which, bytes) = mutate(&mut r, seeds);
                    let ext = Path::new(&seeds[which].0)
                        .extension()
                        .map_or("bin".to_string(), |e| e.to_string_lossy().into_owned());
                    let path = path_dir.join(format!("in{t}.{ext}"));
                    std::fs::write(&path, &bytes).unwrap();
                    let outcome = catch_unwind(AssertUnwindSafe(|| {
                        run_one(&path, seed % 8 == 0, seed % 250 == 0)
                    }));
                    let fail = match outcome {
                        Ok(Ok(())) => None,
                        Ok(Err(m)) => Some(m),
                        Err(_) => Some("panic".to_string()),
                    };
                    if read_cloud(&path).is_ok() {
                        accepted.fetch_add(1, Ordering::Relaxed);
                    }
                    if let Some(m) = fail {
                        failures
                            .lock()
                            .unwrap()
                            .push(format!("seed {seed} (from {}): {m}", seeds[which].0));
                    }
                }
            });
        }
    });
    let secs = t0.elapsed().as_secs_f64();
    let failures = failures.into_inner().unwrap();
    println!(
        "fuzz: {} inputs in {secs:.1} s ({:.0} per second, {threads} threads), {} accepted, {} failures",
        inputs.len(),
        inputs.len() as f64 / secs,
        accepted.load(Ordering::Relaxed),
        failures.len()
    );
    assert!(
        failures.is_empty(),
        "{} failures; reproduce one with EQUISCAN_FUZZ_SEED=<seed>:\n{}",
        failures.len(),
        failures[..failures.len().min(30)].join("\n")
    );
}
