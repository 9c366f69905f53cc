//! Parquet outputs of `equiscan batch`, read back by an outside reader: pyarrow (Apache
//! Arrow's Python library) when `python3 -c "import pyarrow"` works; otherwise the test
//! prints a skip note (CI installs pyarrow in a virtual environment first, see .ci/run).
//!
//! Checked: the schema (x, y, z as double; the point attributes; the feature columns as
//! float, in the NPY column order), the key-value metadata (recipe, input), the row count,
//! and every feature value bit for bit against the NPY output of the same run settings.

mod batch_tiles;

use std::path::Path;
use std::process::Command;

use batch_tiles::{cut, read_npy, thin};
use equiscan::io::read_cloud;

const READER: &str = r#"
import json, struct, sys
import pyarrow.parquet as pq
f = pq.ParquetFile(sys.argv[1])
t = f.read()
meta = {k.decode(): v.decode() for k, v in (f.schema_arrow.metadata or {}).items()}
feature_names = t.column_names[int(sys.argv[3]):]
cols = [t.column(n).to_pylist() for n in feature_names]
with open(sys.argv[2], "wb") as out:
    for i in range(t.num_rows):
        out.write(b"".join(struct.pack("<f", c[i]) for c in cols))
print(json.dumps({
    "rows": t.num_rows,
    "row_groups": f.metadata.num_row_groups,
    "columns": t.column_names,
    "types": [str(t.schema.field(n).type) for n in t.column_names],
    "meta": meta,
    "x0": t.column("x")[0].as_py(),
    "created_by": f.metadata.created_by,
}))
"#;

fn pyarrow() -> bool {
    Command::new("python3")
        .args(["-c", "import pyarrow"])
        .output()
        .is_ok_and(|o| o.status.success())
}

fn run(args: &[&str], dir: &Path) {
    let o = Command::new(env!("CARGO_BIN_EXE_equiscan"))
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
}

#[test]
fn parquet_reads_back_with_pyarrow_and_matches_the_npy_values() {
    if !pyarrow() {
        println!("skipped: python3 with pyarrow is not available (CI installs it; see .ci/run)");
        return;
    }
    let (station, _) = read_cloud("scans/depot_station1.laz".as_ref()).unwrap();
    let d = tempfile::tempdir().unwrap();
    let p = d.path();
    std::fs::create_dir(p.join("tiles")).unwrap();
    cut(&thin(&station, 8), 3, 3, &p.join("tiles"), "las");
    run(
        &[
            "batch", "tiles", "-o", "pq", "-r", "0.12", "--format", "parquet", "-q",
        ],
        p,
    );
    run(&["batch", "tiles", "-o", "npy", "-r", "0.12", "-q"], p);
    for stem in ["tile_0_0", "tile_1_1", "tile_2_2"] {
        let file = p.join(format!("pq/{stem}.parquet"));
        let raw = p.join(format!("{stem}.f32"));
        // x y z + intensity, classification, return_number, gps_time (the demo's LAS attributes)
        let skip = 7;
        let o = Command::new("python3")
            .args(["-c", READER])
            .arg(&file)
            .arg(&raw)
            .arg(skip.to_string())
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        let side: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(p.join(format!("npy/{stem}.npy.json"))).unwrap(),
        )
        .unwrap();
        let (rows, cols, npy) = read_npy(&p.join(format!("npy/{stem}.npy")));
        assert_eq!(v["rows"].as_u64(), Some(rows as u64));
        assert_eq!(v["row_groups"].as_u64(), Some(1));
        let names: Vec<&str> = v["columns"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c.as_str().unwrap())
            .collect();
        assert_eq!(
            &names[..skip],
            [
                "x",
                "y",
                "z",
                "intensity",
                "classification",
                "return_number",
                "gps_time"
            ]
        );
        let npy_names: Vec<&str> = side["columns"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c.as_str().unwrap())
            .collect();
        assert_eq!(&names[skip..], &npy_names[3..]);
        let types: Vec<&str> = v["types"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c.as_str().unwrap())
            .collect();
        assert_eq!(
            &types[..skip],
            [
                "double", "double", "double", "float", "uint8", "uint8", "double"
            ]
        );
        assert!(types[skip..].iter().all(|t| *t == "float"));
        // Metadata: the recipe the sidecar records, and the input.
        let recipe: serde_json::Value =
            serde_json::from_str(v["meta"]["equiscan.recipe"].as_str().unwrap()).unwrap();
        assert_eq!(recipe, side["metadata"]["recipe"]);
        assert!(
            v["meta"]["equiscan.input"]
                .as_str()
                .unwrap()
                .ends_with(&format!("{stem}.las"))
        );
        // x: the file coordinate (origin + local offset, on the LAS 0.001 grid).
        let x0 = side["metadata"]["origin"][0].as_f64().unwrap() + npy[0] as f64;
        assert!((v["x0"].as_f64().unwrap() - x0).abs() < 1e-4);
        // Every feature value, bit for bit.
        let got: Vec<f32> = std::fs::read(&raw)
            .unwrap()
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect();
        let k = cols - 3;
        assert_eq!(got.len(), rows * k);
        for r in 0..rows {
            for c in 0..k {
                assert_eq!(
                    got[r * k + c].to_bits(),
                    npy[r * cols + 3 + c].to_bits(),
                    "{stem} row {r} column {}",
                    names[skip + c]
                );
            }
        }
    }
}
