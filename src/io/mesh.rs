//! Triangle meshes: readers for PLY with faces, STL (ascii and binary) and OBJ, and
//! area-uniform sampling of a mesh into a point cloud with outward normals.
//!
//! Conventions: vertex coordinates in file units, f64; triangles index the vertices (0-based)
//! in the file's order; a triangle `(a, b, c)` faces the side from which `a → b → c` turns
//! anticlockwise, i.e. its normal is `(b − a) × (c − a)`. Meshes of solids are expected to be
//! closed with their triangles facing out of the material (the usual export convention);
//! signed deviations rely on it. Polygons are split into fans `(v0, vk, vk+1)`.
//!
//! [`read_surface`] reads any reference file: a mesh (PLY with a `face` element, STL, OBJ) or
//! a point cloud (LAS, LAZ, PLY without faces). The format is chosen from the content (`ply`,
//! `LASF`, an STL whose size matches its triangle count or whose text starts with `solid` and
//! holds `facet`), and from the extension `.obj` for OBJ.

use std::path::Path;

use nalgebra::Vector3;

use crate::cloud::Cloud;
use crate::error::{Error, Result};
use crate::so3::rng::SplitMix64;

/// A triangle mesh in file coordinates.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Mesh {
    /// Vertex positions, file units.
    pub vertices: Vec<[f64; 3]>,
    /// Triangles as vertex indices, facing out (see the module docs).
    pub triangles: Vec<[u32; 3]>,
}

/// What a reference file holds.
#[derive(Debug, Clone)]
pub enum Surface {
    /// A triangle mesh.
    Mesh(Mesh),
    /// A point cloud (possibly with normals).
    Cloud(Box<Cloud>),
}

impl Mesh {
    /// Total area of the triangles, file units squared.
    pub fn area(&self) -> f64 {
        self.triangles.iter().map(|t| self.triangle_area(t)).sum()
    }

    fn corners(&self, t: &[u32; 3]) -> [Vector3<f64>; 3] {
        t.map(|i| Vector3::from(self.vertices[i as usize]))
    }

    fn triangle_area(&self, t: &[u32; 3]) -> f64 {
        let [a, b, c] = self.corners(t);
        0.5 * (b - a).cross(&(c - a)).norm()
    }

    /// Checks that the mesh has at least one triangle of positive area and finite vertices.
    pub fn check(&self, path: &Path) -> Result<()> {
        if self.vertices.iter().flatten().any(|v| !v.is_finite()) {
            return Err(Error::file(
                path,
                "a vertex has a non-finite coordinate",
                "repair the mesh or export it again",
            ));
        }
        if self.area().partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
            return Err(Error::file(
                path,
                "the mesh has no triangle of positive area",
                "give a mesh with faces, or a point cloud",
            ));
        }
        Ok(())
    }

    /// `n` points drawn uniformly over the surface area (seeded: the same mesh, `n` and `seed`
    /// give the same points), each with its triangle's unit normal. Returns global positions
    /// and normals. Degenerate triangles get no points.
    pub fn sample(&self, n: usize, seed: u64) -> (Vec<[f64; 3]>, Vec<[f32; 3]>) {
        let mut cumulative = Vec::with_capacity(self.triangles.len());
        let mut total = 0.0;
        for t in &self.triangles {
            total += self.triangle_area(t);
            cumulative.push(total);
        }
        let mut rng = SplitMix64::new(seed);
        let mut points = Vec::with_capacity(n);
        let mut normals = Vec::with_capacity(n);
        if total.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
            return (points, normals);
        }
        for _ in 0..n {
            let u = rng.next_f64() * total;
            let k = cumulative
                .partition_point(|&c| c <= u)
                .min(self.triangles.len() - 1);
            let [a, b, c] = self.corners(&self.triangles[k]);
            // Uniform on a triangle: (1 − √r1) a + √r1 (1 − r2) b + √r1 r2 c.
            let (r1, r2) = (rng.next_f64().sqrt(), rng.next_f64());
            let p = a * (1.0 - r1) + b * (r1 * (1.0 - r2)) + c * (r1 * r2);
            let nrm = (b - a).cross(&(c - a)).normalize();
            points.push([p.x, p.y, p.z]);
            normals.push([nrm.x as f32, nrm.y as f32, nrm.z as f32]);
        }
        (points, normals)
    }
}

/// Reads a reference: a mesh or a point cloud (module docs).
pub fn read_surface(path: &Path) -> Result<Surface> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, &e))?;
    if bytes.is_empty() {
        return Err(Error::file(
            path,
            "the file is empty",
            "give a mesh (PLY, STL, OBJ) or a point cloud (LAS, LAZ, PLY)",
        ));
    }
    let mesh = if bytes.starts_with(b"ply") {
        let (cloud, triangles) = super::read_ply_mesh(path)?;
        if triangles.is_empty() {
            return Ok(Surface::Cloud(Box::new(cloud)));
        }
        let vertices = (0..cloud.len()).map(|i| cloud.global(i)).collect();
        Mesh {
            vertices,
            triangles,
        }
    } else if bytes.starts_with(b"LASF") {
        return super::read_cloud(path).map(|(c, _)| Surface::Cloud(Box::new(c)));
    } else if is_binary_stl(&bytes) {
        read_binary_stl(&bytes)
    } else if bytes.starts_with(b"solid") && contains(&bytes, b"facet") {
        read_ascii_stl(path, &bytes)?
    } else if path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("obj"))
    {
        read_obj(path, &bytes)?
    } else {
        return Err(Error::file(
            path,
            "is not a point cloud or mesh equiscan reads",
            "give LAS, LAZ, PLY, STL or OBJ files",
        ));
    };
    check_indices(path, &mesh)?;
    mesh.check(path)?;
    Ok(Surface::Mesh(mesh))
}

fn contains(hay: &[u8], needle: &[u8]) -> bool {
    hay.windows(needle.len()).any(|w| w == needle)
}

/// A binary STL: 80-byte header, u32 triangle count, 50 bytes per triangle, nothing else.
fn is_binary_stl(bytes: &[u8]) -> bool {
    if bytes.len() < 84 {
        return false;
    }
    let n = u32::from_le_bytes([bytes[80], bytes[81], bytes[82], bytes[83]]) as u64;
    84 + 50 * n == bytes.len() as u64 && n > 0
}

fn f32_at(bytes: &[u8], at: usize) -> f64 {
    f32::from_le_bytes([bytes[at], bytes[at + 1], bytes[at + 2], bytes[at + 3]]) as f64
}

/// Binary STL: each triangle stores its normal (ignored: the winding decides), three corners
/// as f32 and a 16-bit attribute. Corners are not shared in STL; vertices are kept per
/// triangle.
fn read_binary_stl(bytes: &[u8]) -> Mesh {
    let n = u32::from_le_bytes([bytes[80], bytes[81], bytes[82], bytes[83]]) as usize;
    let mut mesh = Mesh::default();
    for t in 0..n {
        let rec = 84 + 50 * t;
        let base = mesh.vertices.len() as u32;
        for c in 0..3 {
            let at = rec + 12 + 12 * c;
            mesh.vertices.push([
                f32_at(bytes, at),
                f32_at(bytes, at + 4),
                f32_at(bytes, at + 8),
            ]);
        }
        mesh.triangles.push([base, base + 1, base + 2]);
    }
    mesh
}

fn text_of<'a>(path: &Path, bytes: &'a [u8]) -> Result<&'a str> {
    std::str::from_utf8(bytes).map_err(|_| {
        Error::file(
            path,
            "the text is not UTF-8",
            "export the mesh again as binary STL or PLY",
        )
    })
}

fn number(path: &Path, line: usize, word: Option<&str>) -> Result<f64> {
    match word.map(str::parse::<f64>) {
        Some(Ok(v)) if v.is_finite() => Ok(v),
        _ => Err(Error::file(
            path,
            format!("line {line} does not hold three finite coordinates"),
            "repair the mesh or export it again",
        )),
    }
}

/// Ascii STL: `facet normal … / outer loop / vertex x y z ×3 / endloop / endfacet`.
fn read_ascii_stl(path: &Path, bytes: &[u8]) -> Result<Mesh> {
    let text = text_of(path, bytes)?;
    let mut mesh = Mesh::default();
    let mut corners = 0usize;
    for (k, line) in text.lines().enumerate() {
        let mut words = line.split_whitespace();
        if words.next() == Some("vertex") {
            let v = [
                number(path, k + 1, words.next())?,
                number(path, k + 1, words.next())?,
                number(path, k + 1, words.next())?,
            ];
            mesh.vertices.push(v);
            corners += 1;
            if corners.is_multiple_of(3) {
                let b = (corners - 3) as u32;
                mesh.triangles.push([b, b + 1, b + 2]);
            }
        }
    }
    if !corners.is_multiple_of(3) {
        return Err(Error::file(
            path,
            format!("{corners} vertices do not make whole triangles"),
            "repair the mesh or export it again",
        ));
    }
    Ok(mesh)
}

/// OBJ: `v x y z [w]` lines and `f a b c …` lines whose items are `i`, `i/t`, `i//n` or
/// `i/t/n`, 1-based, negative counting back from the last vertex read. Other lines are
/// ignored.
fn read_obj(path: &Path, bytes: &[u8]) -> Result<Mesh> {
    let text = text_of(path, bytes)?;
    let mut mesh = Mesh::default();
    for (k, line) in text.lines().enumerate() {
        let mut words = line.split_whitespace();
        match words.next() {
            Some("v") => {
                let v = [
                    number(path, k + 1, words.next())?,
                    number(path, k + 1, words.next())?,
                    number(path, k + 1, words.next())?,
                ];
                mesh.vertices.push(v);
            }
            Some("f") => {
                let mut items = Vec::new();
                for w in words {
                    let first = w.split('/').next().unwrap_or("");
                    let i: i64 = first.parse().map_err(|_| {
                        Error::file(
                            path,
                            format!("line {}: face item \"{w}\" is not a vertex number", k + 1),
                            "repair the mesh or export it again",
                        )
                    })?;
                    let n = mesh.vertices.len() as i64;
                    let idx = if i > 0 { i - 1 } else { n + i };
                    if idx < 0 || idx >= n {
                        return Err(Error::file(
                            path,
                            format!(
                                "line {}: face refers to vertex {i}, but {n} vertices are defined before it",
                                k + 1
                            ),
                            "repair the mesh or export it again",
                        ));
                    }
                    items.push(idx as u32);
                }
                if items.len() < 3 {
                    return Err(Error::file(
                        path,
                        format!("line {}: a face needs at least three vertices", k + 1),
                        "repair the mesh or export it again",
                    ));
                }
                for j in 1..items.len() - 1 {
                    mesh.triangles.push([items[0], items[j], items[j + 1]]);
                }
            }
            _ => {}
        }
    }
    Ok(mesh)
}

fn check_indices(path: &Path, mesh: &Mesh) -> Result<()> {
    let n = mesh.vertices.len() as u32;
    if mesh.triangles.iter().flatten().any(|&i| i >= n) {
        return Err(Error::file(
            path,
            "a face refers to a vertex that does not exist",
            "repair the mesh or export it again",
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unit_square() -> Mesh {
        Mesh {
            vertices: vec![
                [0.0, 0.0, 0.0],
                [1.0, 0.0, 0.0],
                [1.0, 1.0, 0.0],
                [0.0, 1.0, 0.0],
            ],
            triangles: vec![[0, 1, 2], [0, 2, 3]],
        }
    }

    #[test]
    fn samples_are_area_uniform_and_seeded() {
        let m = unit_square();
        assert!((m.area() - 1.0).abs() < 1e-12);
        let (p, n) = m.sample(20_000, 7);
        assert_eq!(p, m.sample(20_000, 7).0);
        // Each quarter of the square gets a quarter of the points (binomial σ ≈ 61).
        let q = p.iter().filter(|v| v[0] < 0.5 && v[1] < 0.5).count();
        assert!((q as i64 - 5000).abs() < 300, "{q}");
        assert!(n.iter().all(|v| v == &[0.0, 0.0, 1.0]));
    }

    #[test]
    fn stl_and_obj_readers_agree() {
        let dir = tempfile::tempdir().unwrap();
        let obj = dir.path().join("sq.obj");
        std::fs::write(
            &obj,
            "# square\nv 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nf 1/1 2/2 3/3 4/4\n",
        )
        .unwrap();
        let Surface::Mesh(m) = read_surface(&obj).unwrap() else {
            panic!("not a mesh")
        };
        assert_eq!(m, unit_square());
        let stl = dir.path().join("sq.stl");
        let mut text = String::from("solid sq\n");
        for t in &m.triangles {
            text += "facet normal 0 0 1\nouter loop\n";
            for &i in t {
                let v = m.vertices[i as usize];
                text += &format!("vertex {} {} {}\n", v[0], v[1], v[2]);
            }
            text += "endloop\nendfacet\n";
        }
        text += "endsolid sq\n";
        std::fs::write(&stl, &text).unwrap();
        let Surface::Mesh(a) = read_surface(&stl).unwrap() else {
            panic!("not a mesh")
        };
        let mut bin = vec![0u8; 80];
        bin.extend(2u32.to_le_bytes());
        for t in &m.triangles {
            bin.extend([0u8; 12]);
            for &i in t {
                for c in m.vertices[i as usize] {
                    bin.extend((c as f32).to_le_bytes());
                }
            }
            bin.extend([0u8; 2]);
        }
        let stlb = dir.path().join("sqb.stl");
        std::fs::write(&stlb, &bin).unwrap();
        let Surface::Mesh(b) = read_surface(&stlb).unwrap() else {
            panic!("not a mesh")
        };
        assert_eq!(a, b);
        assert!((a.area() - 1.0).abs() < 1e-12);
        let bad = dir.path().join("bad.obj");
        std::fs::write(&bad, "v 0 0 0\nf 1 2 3\n").unwrap();
        let e = read_surface(&bad).unwrap_err().to_string();
        assert!(e.contains("bad.obj: line 2"), "{e}");
    }
}
