use super::*;
use crate::descriptor::Recipe;
use crate::io::read_cloud;

fn bunny() -> (Cloud, FileInfo) {
    read_cloud(Path::new("tests/data/bunny/bunny.ply")).unwrap()
}

fn spec(path: &Path, format: Format, info: &FileInfo) -> FileSpec {
    FileSpec {
        path: path.to_path_buf(),
        format,
        recipe: Recipe::builder().radius(1.5).build().unwrap(),
        input: info.clone(),
        centres: CentresInfo::All,
        radius_suggested: false,
    }
}

fn write(cloud: &Cloud, spec: FileSpec, step: usize) -> Result<Written> {
    let engine = Engine::new(spec.recipe.clone());
    let index = KdIndex::new(&cloud.positions).unwrap();
    let centres = CentreList::All(cloud.len());
    let mut w = FeatureWriter::create(cloud, spec, &centres)?;
    let prepared = engine.prepare(&cloud.positions, &index)?;
    write_features_in(&engine, &prepared, &centres, &mut w, None, step)?;
    w.finish()
}

fn names(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

#[test]
fn chunked_rows_are_the_whole_matrix_byte_for_byte() {
    let (cloud, info) = bunny();
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.npy");
    let b = dir.path().join("b.npy");
    write(&cloud, spec(&a, Format::Npy, &info), 97).unwrap();
    write(&cloud, spec(&b, Format::Npy, &info), 1 << 16).unwrap();
    let (ba, bb) = (std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
    assert_eq!(ba, bb);
    // The same as the whole matrix computed at once, laid out by hand.
    let recipe = Recipe::builder().radius(1.5).build().unwrap();
    let f = Engine::new(recipe.clone())
        .compute(&cloud, &Centres::All)
        .unwrap();
    let cols = column_names(&recipe, Format::Npy).len();
    let mut want = npy_header_for(cloud.len(), cols);
    let mut row = Vec::new();
    for i in 0..f.len() {
        row.clear();
        push_row(&f, i, true, &mut row);
        assert_eq!(row.len(), cols);
        for v in &row {
            want.extend_from_slice(&v.to_le_bytes());
        }
    }
    assert!(ba == want, "chunked NPY differs from the whole matrix");
    let side = verify(&sidecar_path(&a)).unwrap();
    assert_eq!(side.rows, cloud.len());
    assert_eq!(side.bytes, ba.len() as u64);
    // CRC-32 check value of "123456789" (IEEE 802.3 / zlib: 0xCBF43926, from memory).
    let mut h = crc32fast::Hasher::new();
    h.update(b"123456789");
    assert_eq!(h.finalize(), 0xCBF4_3926);
}

fn npy_header_for(rows: usize, cols: usize) -> Vec<u8> {
    crate::io::npy_header(rows, cols)
}

#[test]
fn a_failure_between_the_two_writes_keeps_the_old_pair() {
    let (cloud, info) = bunny();
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("x.csv");
    write(&cloud, spec(&out, Format::Csv, &info), 1 << 16).unwrap();
    let old = std::fs::read(&out).unwrap();
    let old_side = std::fs::read(sidecar_path(&out)).unwrap();
    // Inject the failure: the sidecar cannot be created (its name is taken by a folder, made
    // after the data file's temporary file exists would be the same: the data is complete
    // under its temporary name when the sidecar fails).
    std::fs::remove_file(sidecar_path(&out)).unwrap();
    std::fs::create_dir(sidecar_path(&out)).unwrap();
    let mut s = spec(&out, Format::Csv, &info);
    s.recipe = Recipe::builder().radius(2.0).build().unwrap();
    let err = write(&cloud, s, 1 << 16).unwrap_err().to_string();
    assert!(err.contains("is a folder"), "{err}");
    assert_eq!(
        std::fs::read(&out).unwrap(),
        old,
        "the data file was replaced alone"
    );
    std::fs::remove_dir(sidecar_path(&out)).unwrap();
    std::fs::write(sidecar_path(&out), &old_side).unwrap();
    assert!(verify(&sidecar_path(&out)).is_ok());
    assert_eq!(names(dir.path()), ["x.csv", "x.csv.json"]);
}

#[test]
fn a_torn_pair_is_refused_by_the_reader_check() {
    let (cloud, info) = bunny();
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.npy");
    let b = dir.path().join("b.npy");
    write(&cloud, spec(&a, Format::Npy, &info), 1 << 16).unwrap();
    let mut s = spec(&b, Format::Npy, &info);
    s.recipe = Recipe::builder().radius(2.0).build().unwrap();
    write(&cloud, s, 1 << 16).unwrap();
    // A kill between the two renames: the new data file beside the old sidecar.
    std::fs::copy(&b, &a).unwrap();
    let err = verify(&sidecar_path(&a)).unwrap_err().to_string();
    assert!(err.contains("does not match its sidecar"), "{err}");
}

#[test]
fn npy_and_csv_of_one_name_keep_their_own_sidecars() {
    assert_eq!(
        sidecar_path(Path::new("d/x.npy")),
        Path::new("d/x.npy.json")
    );
    assert_eq!(sidecar_path(Path::new("x.csv")), Path::new("x.csv.json"));
    assert_eq!(
        Format::Csv.files(Path::new("x.csv")),
        [PathBuf::from("x.csv"), PathBuf::from("x.csv.json")]
    );
    assert_eq!(Format::Ply.files(Path::new("x.ply")).len(), 1);
}
