//! Mesh files: binary PLY, binary STL and OBJ, each written atomically.
//!
//! - PLY (the polygon file format, Turk 1994): `binary_little_endian 1.0`, `element vertex`
//!   with `float x, y, z` and `element face` with `list uchar int vertex_indices`; `comment`
//!   lines say the units (mm, the scan's world frame) and what the mesh is.
//! - STL (binary): an 80-byte header, a `u32` triangle count, then per triangle its unit
//!   normal and three vertices as `f32` little-endian and a zero `u16`. STL has no shared
//!   vertices: readers merge them by position.
//! - OBJ (Wavefront): `v x y z` lines and `f a b c` lines with 1-based indices, `#` comments.
//!
//! Coordinates are world millimetres written as 32-bit floats (PLY, STL) or with 9
//! decimals (OBJ).

use std::io::Write;
use std::path::Path;

use super::{Mesh, MeshError};
use crate::export::write_atomic;

/// A mesh file format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MeshFormat {
    Ply,
    Stl,
    Obj,
}

impl MeshFormat {
    /// All three, in the order they are offered.
    pub const ALL: [Self; 3] = [Self::Ply, Self::Stl, Self::Obj];

    /// The file extension (lower case, no dot).
    #[must_use]
    pub const fn extension(self) -> &'static str {
        match self {
            Self::Ply => "ply",
            Self::Stl => "stl",
            Self::Obj => "obj",
        }
    }

    /// The format named by a file's extension (`.ply`, `.stl`, `.obj`, any case).
    pub fn from_path(path: &Path) -> Result<Self, MeshError> {
        let ext = path
            .extension()
            .map(|e| e.to_string_lossy().to_lowercase())
            .unwrap_or_default();
        match Self::ALL.into_iter().find(|f| f.extension() == ext) {
            Some(f) => Ok(f),
            None => Err(MeshError::Invalid(format!(
                "{}: name the mesh file .ply, .stl or .obj",
                path.display()
            ))),
        }
    }
}

/// Writes `mesh` in the format its name says; `title` goes into the file's comments.
pub fn write(mesh: &Mesh, path: &Path, title: &str) -> Result<(), MeshError> {
    let format = MeshFormat::from_path(path)?;
    let title: String = title.chars().filter(|c| !c.is_control()).collect();
    write_atomic(path, |w| match format {
        MeshFormat::Ply => write_ply(mesh, &title, w),
        MeshFormat::Stl => write_stl(mesh, &title, w),
        MeshFormat::Obj => write_obj(mesh, &title, w),
    })?;
    Ok(())
}

fn write_ply(mesh: &Mesh, title: &str, w: &mut dyn Write) -> std::io::Result<()> {
    write!(
        w,
        "ply\nformat binary_little_endian 1.0\ncomment {title}\n\
         comment units mm (world frame of the scan)\n\
         element vertex {}\nproperty float x\nproperty float y\nproperty float z\n\
         element face {}\nproperty list uchar int vertex_indices\nend_header\n",
        mesh.vertices.len(),
        mesh.triangles.len()
    )?;
    let mut buf = Vec::with_capacity(1 << 16);
    for v in &mesh.vertices {
        for x in v {
            buf.extend_from_slice(&(*x as f32).to_le_bytes());
        }
        if buf.len() > 60_000 {
            w.write_all(&buf)?;
            buf.clear();
        }
    }
    for t in &mesh.triangles {
        buf.push(3);
        for n in t {
            buf.extend_from_slice(&(*n as i32).to_le_bytes());
        }
        if buf.len() > 60_000 {
            w.write_all(&buf)?;
            buf.clear();
        }
    }
    w.write_all(&buf)
}

fn write_stl(mesh: &Mesh, title: &str, w: &mut dyn Write) -> std::io::Result<()> {
    let mut header = [b' '; 80];
    let text = format!("{title} (mm)");
    // an STL header must not start with "solid" (readers would take it for ASCII)
    let text = text.strip_prefix("solid").unwrap_or(&text);
    for (h, b) in header.iter_mut().zip(text.bytes()) {
        *h = b;
    }
    w.write_all(&header)?;
    let count = u32::try_from(mesh.triangles.len())
        .map_err(|_| std::io::Error::other("more than 4 294 967 295 triangles for STL"))?;
    w.write_all(&count.to_le_bytes())?;
    let mut buf = Vec::with_capacity(1 << 16);
    for t in &mesh.triangles {
        let [a, b, c] = t.map(|n| nalgebra::Vector3::from(mesh.vertices[n as usize]));
        let normal = (b - a).cross(&(c - a));
        let normal = normal
            .try_normalize(0.0)
            .unwrap_or_else(nalgebra::Vector3::zeros);
        for p in [normal, a, b, c] {
            for x in p.iter() {
                buf.extend_from_slice(&(*x as f32).to_le_bytes());
            }
        }
        buf.extend_from_slice(&0u16.to_le_bytes());
        if buf.len() > 60_000 {
            w.write_all(&buf)?;
            buf.clear();
        }
    }
    w.write_all(&buf)
}

fn write_obj(mesh: &Mesh, title: &str, w: &mut dyn Write) -> std::io::Result<()> {
    writeln!(w, "# {title}\n# units mm (world frame of the scan)")?;
    for v in &mesh.vertices {
        writeln!(w, "v {:.9} {:.9} {:.9}", v[0], v[1], v[2])?;
    }
    for t in &mesh.triangles {
        writeln!(w, "f {} {} {}", t[0] + 1, t[1] + 1, t[2] + 1)?;
    }
    Ok(())
}
