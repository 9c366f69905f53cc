//! PLY reader checks against the PLY format description's own example files (the cube, and
//! the cube with vertex colours and an edge element; tests/data/ply, see tests/data/README.md),
//! in ascii and converted to both binary encodings, plus hand-built layouts.

use std::path::{Path, PathBuf};

use equiscan::io::{read_cloud, read_ply_mesh};

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data")
        .join(name)
}

/// The cube's corners in file order, as the description lists them.
const CUBE: [[f32; 3]; 8] = [
    [0.0, 0.0, 0.0],
    [0.0, 0.0, 1.0],
    [0.0, 1.0, 1.0],
    [0.0, 1.0, 0.0],
    [1.0, 0.0, 0.0],
    [1.0, 0.0, 1.0],
    [1.0, 1.0, 1.0],
    [1.0, 1.0, 0.0],
];

/// The six quadrilaterals split into fans (v0, vk, vk+1).
const CUBE_TRIANGLES: [[u32; 3]; 12] = [
    [0, 1, 2],
    [0, 2, 3],
    [7, 6, 5],
    [7, 5, 4],
    [0, 4, 5],
    [0, 5, 1],
    [1, 5, 6],
    [1, 6, 2],
    [2, 6, 7],
    [2, 7, 3],
    [3, 7, 4],
    [3, 4, 0],
];

#[test]
fn cube_reads_the_same_in_all_three_encodings() {
    for enc in ["ascii", "binary_little_endian", "binary_big_endian"] {
        let path = data(&format!("ply/cube_{enc}.ply"));
        let (cloud, info) = read_cloud(&path).unwrap();
        assert_eq!(info.encoding.as_deref(), Some(enc));
        assert_eq!(info.point_count, 8);
        assert_eq!(info.other_elements, vec!["face 6"]);
        assert_eq!(cloud.origin, [0.0; 3]);
        assert_eq!(cloud.positions, CUBE.to_vec(), "{enc}");
        assert!(cloud.attribute_names().is_empty());
        let (mesh, tris) = read_ply_mesh(&path).unwrap();
        assert_eq!(mesh, cloud);
        assert_eq!(tris, CUBE_TRIANGLES.to_vec(), "{enc}");
    }
}

#[test]
fn cube_with_colours_and_edges_skips_the_edge_element() {
    let mut first = None;
    for enc in ["ascii", "binary_little_endian", "binary_big_endian"] {
        let path = data(&format!("ply/cube_colour_edges_{enc}.ply"));
        let (cloud, tris) = read_ply_mesh(&path).unwrap();
        assert_eq!(cloud.positions, CUBE.to_vec());
        let colour = cloud.color.as_ref().unwrap();
        assert_eq!(colour[0], [255, 0, 0]);
        assert_eq!(colour[7], [0, 0, 255]);
        // Two triangles, then five quadrilaterals of two triangles each.
        assert_eq!(tris.len(), 12);
        assert_eq!(&tris[..3], &[[0, 1, 2], [0, 2, 3], [7, 6, 5]]);
        match &first {
            None => first = Some((cloud, tris)),
            Some(f) => assert_eq!(f, &(cloud, tris), "{enc}"),
        }
        let (_, info) = read_cloud(&path).unwrap();
        assert_eq!(info.other_elements, vec!["face 7", "edge 5"]);
    }
}

#[test]
fn bunny_mesh_has_its_declared_vertices_and_triangles() {
    let (cloud, tris) = read_ply_mesh(&data("bunny/bunny.ply")).unwrap();
    assert_eq!(cloud.len(), 1839);
    assert_eq!(tris.len(), 3674);
    assert!(tris.iter().flatten().all(|&i| (i as usize) < cloud.len()));
}

/// Encodes a binary little-endian PLY: header text then raw bytes.
fn ply_le(header: &str, body: &[u8]) -> Vec<u8> {
    let mut v = header.as_bytes().to_vec();
    v.extend_from_slice(body);
    v
}

#[test]
fn elements_before_vertex_and_lists_inside_vertex_are_skipped() {
    let dir = tempfile::tempdir().unwrap();
    let header = "ply\nformat binary_little_endian 1.0\n\
        element info 2\nproperty list uchar ushort tags\nproperty double stamp\n\
        element vertex 2\nproperty uchar flag\nproperty double x\nproperty list ushort float extra\n\
        property double y\nproperty double z\nproperty ushort red\nproperty ushort green\nproperty ushort blue\n\
        property float scalar_intensity\nend_header\n";
    let mut body = Vec::new();
    // info 0: three tags; info 1: none.
    body.push(3);
    for t in [1u16, 2, 3] {
        body.extend_from_slice(&t.to_le_bytes());
    }
    body.extend_from_slice(&1.5f64.to_le_bytes());
    body.push(0);
    body.extend_from_slice(&2.5f64.to_le_bytes());
    let pts = [
        [500_000.25f64, 4_000_000.5, 12.125],
        [500_001.0, 4_000_001.75, 13.0],
    ];
    for (i, p) in pts.iter().enumerate() {
        body.push(7);
        body.extend_from_slice(&p[0].to_le_bytes());
        body.extend_from_slice(&(i as u16 + 1).to_le_bytes());
        for k in 0..=i {
            body.extend_from_slice(&(k as f32).to_le_bytes());
        }
        body.extend_from_slice(&p[1].to_le_bytes());
        body.extend_from_slice(&p[2].to_le_bytes());
        for c in [1000u16, 2000, 65535] {
            body.extend_from_slice(&c.to_le_bytes());
        }
        body.extend_from_slice(&(0.25f32 * i as f32).to_le_bytes());
    }
    let path = dir.path().join("mixed.ply");
    std::fs::write(&path, ply_le(header, &body)).unwrap();
    let (cloud, info) = read_cloud(&path).unwrap();
    // Double coordinates: the origin is the first vertex rounded to whole units.
    assert_eq!(cloud.origin, [500_000.0, 4_000_001.0, 12.0]);
    assert_eq!(cloud.positions, vec![[0.25, -0.5, 0.125], [1.0, 0.75, 1.0]]);
    assert_eq!(cloud.color, Some(vec![[1000, 2000, 65535]; 2]));
    assert_eq!(cloud.intensity, Some(vec![0.0, 0.25]));
    assert_eq!(info.other_fields, vec!["flag", "extra"]);
    assert_eq!(info.other_elements, vec!["info 2"]);
}

#[test]
fn ascii_records_may_span_lines_and_carry_comments_and_crlf() {
    let dir = tempfile::tempdir().unwrap();
    let text = "ply\r\nformat ascii 1.0\r\ncomment any text\r\nobj_info scanner test\r\n\
        element vertex 3\r\nproperty double x\r\nproperty double y\r\nproperty double z\r\n\
        property float nx\r\nproperty float ny\r\nproperty float nz\r\nproperty int intensity\r\nend_header\r\n\
        1.5 2.5 3.5 0 0 1 10\r\n-1 -2 -3\r\n1 0 0 20\r\n0 0 0 0 1 0 30\r\n";
    let path = dir.path().join("a.ply");
    std::fs::write(&path, text).unwrap();
    let (cloud, _) = read_cloud(&path).unwrap();
    assert_eq!(cloud.origin, [2.0, 3.0, 4.0]);
    assert_eq!(cloud.len(), 3);
    assert_eq!(cloud.global(1), [-1.0, -2.0, -3.0]);
    assert_eq!(cloud.normals.as_ref().unwrap()[2], [0.0, 1.0, 0.0]);
    assert_eq!(cloud.intensity, Some(vec![10.0, 20.0, 30.0]));
}
