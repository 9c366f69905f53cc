//! The committed malformed corpus (tests/data/malformed, written by
//! tools/make_malformed_corpus.rs): every file has the outcome its row of `expected.csv`
//! states: `accepted` with that many points, or `refused` with a one-line message naming the
//! file and containing the row's fragment. The point source agrees with `read_cloud`.

use std::collections::BTreeSet;
use std::path::Path;

use equiscan::io::{PointSource, read_cloud};

#[test]
fn every_corpus_file_has_its_expected_outcome() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/malformed");
    let table = std::fs::read_to_string(dir.join("expected.csv")).unwrap();
    let mut listed = BTreeSet::new();
    let (mut accepted, mut refused) = (0, 0);
    let mut wrong = Vec::new();
    for line in table.lines().skip(1) {
        let mut parts = line.splitn(3, ',');
        let (Some(name), Some(outcome), Some(detail)) = (parts.next(), parts.next(), parts.next())
        else {
            panic!("bad row {line:?}");
        };
        listed.insert(name.to_string());
        let path = dir.join(name);
        let read = read_cloud(&path);
        let streamed = PointSource::open(&path).and_then(|mut s| {
            let mut c = s.empty_cloud(0);
            while s.read_into(&mut c, 16)? > 0 {}
            Ok(c)
        });
        match (outcome, &read) {
            ("accepted", Ok((cloud, _))) => {
                accepted += 1;
                if cloud.len().to_string() != detail {
                    wrong.push(format!("{name}: {} points, expected {detail}", cloud.len()));
                }
                if streamed.as_ref().ok() != Some(cloud) {
                    wrong.push(format!("{name}: the point source disagrees"));
                }
            }
            ("refused", Err(e)) => {
                refused += 1;
                let m = e.to_string();
                let one_line = !m.contains('\n') && m.starts_with(&format!("{}: ", path.display()));
                if !one_line || !m.contains(detail) {
                    wrong.push(format!("{name}: {m:?} should contain {detail:?}"));
                }
                if streamed.is_ok() {
                    wrong.push(format!("{name}: the point source accepted it"));
                }
            }
            (_, Ok((c, _))) => wrong.push(format!(
                "{name}: accepted ({} points), expected {outcome} {detail:?}",
                c.len()
            )),
            (_, Err(e)) => wrong.push(format!(
                "{name}: refused ({e}), expected {outcome} {detail}"
            )),
        }
    }
    let present: BTreeSet<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n != "expected.csv")
        .collect();
    assert_eq!(present, listed, "every file has a row and every row a file");
    assert!(listed.len() >= 100, "{} files", listed.len());
    println!(
        "corpus: {} files, {accepted} accepted, {refused} refused",
        listed.len()
    );
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
}
