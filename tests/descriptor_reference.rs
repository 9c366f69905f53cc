//! The engine against an independent numpy/scipy implementation of the same definition.
//!
//! Source of the fixture: tools/fixtures/descriptor_reference.py (numpy, scipy.spatial.cKDTree,
//! scipy.special.sph_harm_y converted to the crate's real harmonics, Clebsch–Gordan by Racah's
//! formula) run on the Stanford bunny (tests/data/bunny), library versions recorded in the JSON
//! beside each fixture: tests/data/descriptor/bunny_reference.* (descriptor version 1) and
//! bunny_reference_v2.* (version 2). No Python is needed to run this test.

use std::path::Path;

use equiscan::descriptor::{Centres, Engine, Invariants, Recipe};

fn data(rel: &str) -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// A little-endian float64 `.npy` matrix.
fn read_npy_f64(path: &Path) -> (usize, usize, Vec<f64>) {
    let b = std::fs::read(path).unwrap();
    assert_eq!(&b[..6], b"\x93NUMPY");
    let len = u16::from_le_bytes([b[8], b[9]]) as usize;
    let header = std::str::from_utf8(&b[10..10 + len]).unwrap();
    assert!(header.contains("'descr': '<f8'") && header.contains("'fortran_order': False"));
    let shape = header.split("'shape': (").nth(1).unwrap();
    let dims: Vec<usize> = shape[..shape.find(')').unwrap()]
        .split(',')
        .filter_map(|t| t.trim().parse().ok())
        .collect();
    let vals: Vec<f64> = b[10 + len..]
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes(c.try_into().unwrap()))
        .collect();
    assert_eq!(vals.len(), dims[0] * dims[1]);
    (dims[0], dims[1], vals)
}

#[test]
fn bunny_matches_the_numpy_scipy_reference() {
    check("tests/data/descriptor/bunny_reference", 1);
}

#[test]
fn bunny_matches_the_numpy_scipy_reference_in_version_2() {
    check("tests/data/descriptor/bunny_reference_v2", 2);
}

fn check(prefix: &str, version: u32) {
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(data(&format!("{prefix}.json"))).unwrap())
            .unwrap();
    assert_eq!(meta["recipe"]["version"].as_u64(), Some(version as u64));
    let (rows, cols, reference) = read_npy_f64(&data(&format!("{prefix}.npy")));
    let names: Vec<&str> = meta["columns"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap())
        .collect();
    assert_eq!(names.len(), cols);
    let centres: Vec<usize> = meta["centres"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap() as usize)
        .collect();
    assert_eq!(centres.len(), rows);

    let (cloud, _) = equiscan::io::read_cloud(&data("tests/data/bunny/bunny.ply")).unwrap();
    let recipe = Recipe::builder()
        .version(version)
        .radii([1.5, 0.75])
        .degree(4)
        .shells(6)
        .invariants(Invariants::parse("norms,power,bispectrum").unwrap())
        .keep_coefficients(true)
        .build()
        .unwrap();
    let engine = Engine::new(recipe);
    let f = engine.compute(&cloud, &Centres::Indices(centres)).unwrap();

    // Our values by column name.
    let rec = engine.recipe();
    let ours = |name: &str, i: usize| -> f64 {
        if let Some(s) = rec
            .count_column_names()
            .iter()
            .position(|n| n == name)
            .filter(|p| p % 2 == 0)
        {
            return f.count(i, s / 2) as f64;
        }
        if let Some(c) = f.columns.iter().position(|n| n == name) {
            return f.row(i)[c] as f64;
        }
        let c = rec
            .coefficient_names()
            .iter()
            .position(|n| n == name)
            .unwrap_or_else(|| panic!("no column {name}"));
        let per = rec.coefficients_per_scale();
        f.coefficients_of(i, c / per).unwrap()[c % per] as f64
    };
    let mut worst = (0.0f64, "");
    let mut compared = 0;
    for (c, name) in names.iter().enumerate() {
        let col: Vec<f64> = (0..rows).map(|i| reference[i * cols + c]).collect();
        let big = col.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for (i, want) in col.iter().enumerate() {
            let got = ours(name, i);
            if name.ends_with("_count") {
                assert_eq!(got, *want, "{name} at centre row {i}");
                continue;
            }
            if big < 1e-12 {
                // Identically zero in exact arithmetic (odd bispectrum paths with two equal
                // degrees): the reference holds rounding noise, we hold 0.
                assert!(got.abs() < 1e-12, "{name} at row {i}: {got}");
                continue;
            }
            let e = (got - want).abs() / big;
            if e > worst.0 {
                worst = (e, name);
            }
            compared += 1;
        }
    }
    assert!(compared > 50_000, "{compared}");
    assert!(
        worst.0 < 1e-5,
        "largest difference {:e} of the column's largest value, in {}",
        worst.0,
        worst.1
    );
    eprintln!(
        "version {version}: worst relative difference {:e} in {}",
        worst.0, worst.1
    );
}
