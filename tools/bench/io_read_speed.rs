//! Read speed of `read_cloud` for LAS, LAZ, binary PLY and E57 next to the raw file-read
//! floor.
//!
//! ```text
//! cargo run --release --example io_read_speed -- [POINTS] [FOLDER]
//! ```
//!
//! Writes a seeded synthetic scan of POINTS points (default 5 000 000) into FOLDER (default: a
//! new temporary folder, removed at the end) as LAS 1.4 (format 7), LAZ, binary PLY from
//! `write_ply` (double x y z, uchar colour, float intensity, uchar classification and return
//! number, double GPS time), a plain float PLY (float x y z, float normals, uchar colour) and
//! an E57 (ASTM E2807) of one scan written by the `e57` crate (double x y z, 16-bit
//! intensity, 8-bit colour, a pose).
//! Files of the right size already in FOLDER are reused. Each file is first read once to warm
//! the page cache; then the best of five runs is reported for (a) `cat FILE > /dev/null` and
//! reading the raw bytes into a 1 MiB buffer (the floor), (b) for LAS/LAZ the las crate's own
//! `fill_points` loop without decoding, for E57 the e57 crate's own point iterator, and (c)
//! `read_cloud`.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::time::Instant;

use equiscan::Cloud;
use equiscan::io::{read_cloud, write_atomic, write_las, write_ply};

fn scan(n: usize) -> Cloud {
    // A wavy terrain sampled on a jittered grid with 5 cm spacing, far from the file origin.
    let side = (n as f64).sqrt().ceil() as usize;
    let mut state = 0x2545_F491_4F6C_DD1Du64;
    let mut rnd = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut c = Cloud::new([638_000.0, 4_853_000.0, 100.0], Vec::with_capacity(n));
    let mut intensity = Vec::with_capacity(n);
    let mut color = Vec::with_capacity(n);
    let mut class = Vec::with_capacity(n);
    let mut ret = Vec::with_capacity(n);
    let mut gps = Vec::with_capacity(n);
    for i in 0..n {
        let (gx, gy) = ((i % side) as f64, (i / side) as f64);
        let x = (gx + rnd() - 0.5) * 0.05 - side as f64 * 0.025;
        let y = (gy + rnd() - 0.5) * 0.05 - side as f64 * 0.025;
        let z = 2.0 * (x * 0.05).sin() * (y * 0.03).cos() + rnd() * 0.01;
        // Millimetre values, as LAS stores them at scale 0.001.
        let mm = |v: f64| ((v * 1000.0).round() / 1000.0) as f32;
        c.positions.push([mm(x), mm(y), mm(z)]);
        intensity.push((rnd() * 4000.0).round() as f32);
        color.push([
            (rnd() * 255.0) as u16,
            (rnd() * 255.0) as u16,
            (rnd() * 255.0) as u16,
        ]);
        class.push(if z < 0.0 { 2 } else { 1 });
        ret.push(1);
        gps.push(1.0e5 + i as f64 * 1e-5);
    }
    c.intensity = Some(intensity);
    c.color = Some(color);
    c.classification = Some(class);
    c.return_number = Some(ret);
    c.gps_time = Some(gps);
    c
}

/// A float PLY as structured-light scanners write it: float xyz, float normals, uchar colour.
fn write_float_ply(path: &Path, c: &Cloud) {
    let header = format!(
        "ply\nformat binary_little_endian 1.0\nelement vertex {}\nproperty float x\nproperty float y\nproperty float z\nproperty float nx\nproperty float ny\nproperty float nz\nproperty uchar red\nproperty uchar green\nproperty uchar blue\nend_header\n",
        c.len()
    );
    write_atomic(path, |w| {
        use std::io::Write;
        let io = |e: std::io::Error| equiscan::Error::io(path, &e);
        w.write_all(header.as_bytes()).map_err(io)?;
        let colours = c.color.as_ref().unwrap();
        let mut rec = Vec::with_capacity(27);
        for (p, col) in c.positions.iter().zip(colours) {
            rec.clear();
            for v in p.iter().chain(&[0.0f32, 0.0, 1.0]) {
                rec.extend_from_slice(&v.to_le_bytes());
            }
            rec.extend(col.iter().map(|&v| v as u8));
            w.write_all(&rec).map_err(io)?;
        }
        Ok(())
    })
    .unwrap();
}

/// An E57 file of one scan, written by the `e57` crate: double x y z (about the scan's
/// position, which the pose carries into the file frame), 16-bit intensity, 8-bit colour.
fn write_e57(path: &Path, c: &Cloud) {
    use e57::{Record, RecordValue as V};
    let mut w = e57::E57Writer::from_file(path, "{5b0e3d1a-0000-4000-8000-00000000e570}").unwrap();
    let proto = vec![
        Record::CARTESIAN_X_F64,
        Record::CARTESIAN_Y_F64,
        Record::CARTESIAN_Z_F64,
        Record::INTENSITY_U16,
        Record::COLOR_RED_U8,
        Record::COLOR_GREEN_U8,
        Record::COLOR_BLUE_U8,
    ];
    let mut pc = w
        .add_pointcloud("{5b0e3d1a-0000-4000-8000-00000000e571}", proto)
        .unwrap();
    pc.set_name(Some("speed".into()));
    pc.set_transform(Some(e57::Transform {
        rotation: e57::Quaternion {
            w: 1.0,
            x: 0.0,
            y: 0.0,
            z: 0.0,
        },
        translation: e57::Translation {
            x: c.origin[0],
            y: c.origin[1],
            z: c.origin[2],
        },
    }));
    let intensity = c.intensity.as_ref().unwrap();
    let colour = c.color.as_ref().unwrap();
    for (i, p) in c.positions.iter().enumerate() {
        pc.add_point(vec![
            V::Double(p[0] as f64),
            V::Double(p[1] as f64),
            V::Double(p[2] as f64),
            V::Integer(intensity[i] as i64),
            V::Integer(colour[i][0] as i64),
            V::Integer(colour[i][1] as i64),
            V::Integer(colour[i][2] as i64),
        ])
        .unwrap();
    }
    pc.finalize().unwrap();
    w.finalize().unwrap();
}

/// The e57 crate's own point iterator (pose applied, nothing kept): the best an E57 reader
/// built on it can do.
fn e57_crate_only(path: &Path) -> u64 {
    let mut r = e57::E57Reader::from_file(path).unwrap();
    let mut n = 0;
    for pc in r.pointclouds() {
        for p in r.pointcloud_simple(&pc).unwrap() {
            std::hint::black_box(p.unwrap());
            n += 1;
        }
    }
    n
}

/// Timed runs per measurement; the best is reported (least disturbed by other load).
const RUNS: usize = 5;

fn best_of<T>(runs: usize, mut f: impl FnMut() -> T) -> f64 {
    (0..runs)
        .map(|_| {
            let t = Instant::now();
            std::hint::black_box(f());
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// The las crate's own streaming (`fill_points` into one reused buffer), no decoding: the
/// best a LAS/LAZ reader built on it can do.
fn las_crate_only(path: &Path) -> u64 {
    let mut r = las::Reader::from_path(path).unwrap();
    let mut pd = las::PointDataBuilder::new().for_header(r.header()).build();
    let mut total = 0;
    loop {
        let n = r.fill_points(1 << 20, &mut pd).unwrap();
        if n == 0 {
            return total;
        }
        total += n;
    }
}

fn raw_read(path: &Path) -> u64 {
    let mut f = std::fs::File::open(path).unwrap();
    let mut buf = vec![0u8; 1 << 20];
    let mut total = 0;
    loop {
        let n = f.read(&mut buf).unwrap();
        if n == 0 {
            return total;
        }
        total += n as u64;
    }
}

fn main() {
    let mut args = std::env::args().skip(1);
    let n: usize = args
        .next()
        .map_or(5_000_000, |s| s.parse().expect("POINTS"));
    let tmp;
    let dir: PathBuf = match args.next() {
        Some(d) => PathBuf::from(d),
        None => {
            tmp = tempfile_dir();
            tmp.clone()
        }
    };
    std::fs::create_dir_all(&dir).unwrap();
    let files = [
        ("LAS 1.4 format 7", dir.join("speed.las")),
        ("LAZ 1.4 format 7", dir.join("speed.laz")),
        ("PLY binary (write_ply)", dir.join("speed.ply")),
        ("PLY binary float+normals+rgb", dir.join("speed_float.ply")),
        ("E57 double xyz+intensity+rgb", dir.join("speed.e57")),
    ];
    // Files of the right size from an earlier run in the same FOLDER are reused.
    let fresh = files
        .iter()
        .all(|(_, p)| equiscan::io::read_cloud(p).is_ok_and(|(c, _)| c.len() == n));
    if !fresh {
        let cloud = scan(n);
        let t = Instant::now();
        write_las(&files[0].1, &cloud, &[]).unwrap();
        write_las(&files[1].1, &cloud, &[]).unwrap();
        write_ply(&files[2].1, &cloud, &[]).unwrap();
        write_float_ply(&files[3].1, &cloud);
        let _ = std::fs::remove_file(&files[4].1);
        write_e57(&files[4].1, &cloud);
        eprintln!(
            "wrote {n}-point files in {:.1} s",
            t.elapsed().as_secs_f64()
        );
    }
    println!(
        "| file | size MB | cat s | raw read s | las / e57 crate alone s | read_cloud s | Mpts/s | × cat | × raw read |"
    );
    println!("|---|---|---|---|---|---|---|---|---|");
    for (name, path) in &files {
        raw_read(path);
        let size = std::fs::metadata(path).unwrap().len() as f64 / 1e6;
        let floor = best_of(RUNS, || raw_read(path));
        let cat = best_of(RUNS, || {
            std::process::Command::new("cat")
                .arg(path)
                .stdout(std::process::Stdio::null())
                .status()
                .unwrap()
        });
        let crate_only = if name.starts_with("LA") {
            format!("{:.3}", best_of(RUNS, || las_crate_only(path)))
        } else if name.starts_with("E57") {
            format!("{:.3}", best_of(RUNS, || e57_crate_only(path)))
        } else {
            "–".to_string()
        };
        let read = best_of(RUNS, || read_cloud(path).unwrap().0.len());
        println!(
            "| {name} | {size:.0} | {cat:.3} | {floor:.3} | {crate_only} | {read:.3} | {:.1} | {:.1} | {:.1} |",
            n as f64 / read / 1e6,
            read / cat,
            read / floor
        );
    }
    if std::env::args().nth(2).is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
}

fn tempfile_dir() -> PathBuf {
    let d = std::env::temp_dir().join(format!("equiscan-io-speed-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}
