//! PLY point sets: landmarks as coloured vertices that mesh viewers and point-cloud tools open.
//!
//! ASCII PLY 1.0 (the polygon file format of Turk, 1994, as documented with the format): a
//! header naming one `vertex` element with `double x, y, z` (world mm) and `uchar red, green,
//! blue`, then one line per point. The header's `comment` lines name the specimen and trial,
//! and one `comment point INDEX NAME STATE` line per vertex says which landmark each vertex
//! is. Only points with a position are written; missing ones are listed as
//! `comment missing NAME`. Colours: placed (220, 70, 40), estimated (60, 110, 230),
//! semilandmarks (40, 170, 90).

use std::path::Path;

use super::{ExportError, write_atomic};

/// What kind of point a vertex is; sets its colour.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PointKind {
    Placed,
    Estimated,
    Semilandmark,
}

impl PointKind {
    const fn rgb(self) -> [u8; 3] {
        match self {
            Self::Placed => crate::landmarks::palette::PLACED,
            Self::Estimated => crate::landmarks::palette::ESTIMATED,
            Self::Semilandmark => crate::landmarks::palette::CURVE,
        }
    }

    const fn name(self) -> &'static str {
        match self {
            Self::Placed => "placed",
            Self::Estimated => "estimated",
            Self::Semilandmark => "semilandmark",
        }
    }
}

/// One named point; `None` position: missing.
#[derive(Clone, Debug, PartialEq)]
pub struct NamedPoint {
    pub name: String,
    pub position_mm: Option<[f64; 3]>,
    pub kind: PointKind,
}

/// Writes one point set as ASCII PLY, atomically. `title` goes into the first comment.
pub fn write_ply(path: &Path, title: &str, points: &[NamedPoint]) -> Result<(), ExportError> {
    let present: Vec<&NamedPoint> = points.iter().filter(|p| p.position_mm.is_some()).collect();
    write_atomic(path, |w| {
        writeln!(w, "ply\nformat ascii 1.0")?;
        writeln!(w, "comment {}", one_line(title))?;
        writeln!(w, "comment units mm (world frame of the scan)")?;
        for (i, p) in present.iter().enumerate() {
            writeln!(
                w,
                "comment point {i} {} {}",
                one_line(&p.name),
                p.kind.name()
            )?;
        }
        for p in points.iter().filter(|p| p.position_mm.is_none()) {
            writeln!(w, "comment missing {}", one_line(&p.name))?;
        }
        writeln!(w, "element vertex {}", present.len())?;
        for axis in ["x", "y", "z"] {
            writeln!(w, "property double {axis}")?;
        }
        for c in ["red", "green", "blue"] {
            writeln!(w, "property uchar {c}")?;
        }
        writeln!(w, "end_header")?;
        for p in &present {
            let [x, y, z] = p.position_mm.expect("filtered");
            let [r, g, b] = p.kind.rgb();
            writeln!(w, "{x:?} {y:?} {z:?} {r} {g} {b}")?;
        }
        Ok(())
    })
}

/// A comment must stay on one line.
fn one_line(s: &str) -> String {
    s.replace(['\n', '\r'], " ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_and_vertices() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.ply");
        let pts = vec![
            NamedPoint {
                name: "tip".into(),
                position_mm: Some([1.5, -2.0, 0.1]),
                kind: PointKind::Placed,
            },
            NamedPoint {
                name: "eye".into(),
                position_mm: None,
                kind: PointKind::Placed,
            },
            NamedPoint {
                name: "c_s01".into(),
                position_mm: Some([0.0, 1e-7, 3.0]),
                kind: PointKind::Semilandmark,
            },
        ];
        write_ply(&p, "specimen A\ntrial 1", &pts).unwrap();
        let text = std::fs::read_to_string(&p).unwrap();
        let (header, body) = text.split_once("end_header\n").unwrap();
        assert!(header.starts_with("ply\nformat ascii 1.0\ncomment specimen A trial 1\n"));
        assert!(header.contains("comment point 1 c_s01 semilandmark\n"));
        assert!(header.contains("comment missing eye\n"));
        assert!(header.contains("element vertex 2\nproperty double x\n"));
        let rows: Vec<Vec<f64>> = body
            .lines()
            .map(|l| l.split(' ').map(|v| v.parse().unwrap()).collect())
            .collect();
        assert_eq!(
            rows,
            vec![
                vec![1.5, -2.0, 0.1, 220.0, 70.0, 40.0],
                vec![0.0, 1e-7, 3.0, 40.0, 170.0, 90.0]
            ]
        );
    }
}
