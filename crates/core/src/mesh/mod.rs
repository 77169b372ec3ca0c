//! Surface meshes of specimens: iso-surfaces at full resolution, smoothing, decimation, a
//! report, and PLY/STL/OBJ files.
//!
//! A [`Mesh`] is a list of vertices in world millimetres and of triangles (vertex indices,
//! counter-clockwise seen from outside, so normals point out of the material). It is made by
//! [`march::extract`] from a [`march::Field`]:
//! - [`IntensityField`]: the scan's intensities at an iso-value (ISO-50 by default, see
//!   [`crate::landmarks::pick::iso50`]), optionally inside a label: voxels outside the label
//!   read at most the field's `outside` value (the background), so the surface follows the
//!   intensities where the label holds the material's edge and closes along the label's
//!   boundary where the label cuts through material;
//! - [`MaskField`]: a label's voxels alone (1 inside, 0 outside, iso-value ½).
//!
//! [`smooth::taubin`] smooths without shrinking; [`decimate`] reduces the triangle count by
//! quadric-error edge collapse (meshoptimizer's simplifier); [`MeshReport`] gives area,
//! enclosed volume, pieces, closedness and Euler characteristic; [`write`] saves binary PLY,
//! binary STL and OBJ atomically.
//!
//! Must not import `render`.

pub mod march;
pub mod smooth;
pub mod write;

use serde::Serialize;

use crate::labels::BitMask;
use crate::volume::Volume;

/// Why a mesh could not be made or written.
#[derive(Debug, thiserror::Error)]
pub enum MeshError {
    #[error(
        "the surface is empty: no voxel reaches the iso-value {0} (inside the label, if one is given)"
    )]
    Empty(f64),
    #[error("the label grid {0:?} is not the scan's {1:?}")]
    GridMismatch([usize; 3], [usize; 3]),
    #[error("{0}")]
    Invalid(String),
    #[error(transparent)]
    Export(#[from] crate::export::ExportError),
}

/// A triangle mesh in world millimetres.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Mesh {
    pub vertices: Vec<[f64; 3]>,
    pub triangles: Vec<[u32; 3]>,
}

/// The scan's intensities at an iso-value, optionally inside a label (see the module docs).
pub struct IntensityField<'a> {
    pub volume: &'a Volume,
    pub iso: f64,
    /// Below `iso`: what voxels outside the label (and outside the grid) read at most.
    pub outside: f64,
    pub within: Option<&'a BitMask>,
}

impl march::Field for IntensityField<'_> {
    fn dims(&self) -> [usize; 3] {
        self.volume.dims()
    }
    fn iso(&self) -> f64 {
        self.iso
    }
    fn outside(&self) -> f64 {
        self.outside
    }
    fn plane(&self, k: usize, out: &mut [f32]) {
        let [nx, ny, _] = self.volume.dims();
        let base = nx * ny * k;
        let rescale = self.volume.rescale();
        crate::with_voxels!(self.volume.voxels(), |s| {
            use crate::volume::Voxel;
            for (o, v) in out.iter_mut().zip(&s[base..base + nx * ny]) {
                *o = match rescale {
                    None => v.to_f32(),
                    Some(r) => r.apply(v.to_f64()) as f32,
                };
            }
        });
        if let Some(m) = self.within {
            lower_outside(m, k, self.outside as f32, out);
        }
    }
}

/// [`IntensityField`] on a scan of any size: each plane read at full resolution through the
/// volume interface, so a store is meshed a few chunk layers at a time (the slabs of
/// [`march::extract`] are stitched at their seams) and memory stays within the source's cache
/// budget plus the mesh. A plane that cannot be read is an error recorded in `failed`; the
/// plane then reads as outside and the caller refuses the mesh.
pub struct SourceField<'a> {
    pub source: &'a dyn crate::volume::VolumeSource,
    pub iso: f64,
    pub outside: f64,
    pub within: Option<&'a BitMask>,
    pub failed: std::sync::Mutex<Option<String>>,
}

impl march::Field for SourceField<'_> {
    fn dims(&self) -> [usize; 3] {
        self.source.dims()
    }
    fn iso(&self) -> f64 {
        self.iso
    }
    fn outside(&self) -> f64 {
        self.outside
    }
    fn plane(&self, k: usize, out: &mut [f32]) {
        let [nx, ny, _] = self.source.dims();
        let block = match self.source.read_block(0, &[0..nx, 0..ny, k..k + 1]) {
            Ok(b) => b,
            Err(e) => {
                out.fill(self.outside as f32);
                let mut f = self
                    .failed
                    .lock()
                    .unwrap_or_else(std::sync::PoisonError::into_inner);
                f.get_or_insert_with(|| format!("plane {k}: {e}"));
                return;
            }
        };
        // a whole volume is the source itself; a block read holds just this plane
        let base = match block {
            crate::volume::Block::Whole(_) => nx * ny * k,
            crate::volume::Block::Read(_) => 0,
        };
        let rescale = block.rescale();
        crate::with_voxels!(block.voxels(), |s| {
            use crate::volume::Voxel;
            for (o, v) in out.iter_mut().zip(&s[base..base + nx * ny]) {
                *o = match rescale {
                    None => v.to_f32(),
                    Some(r) => r.apply(v.to_f64()) as f32,
                };
            }
        });
        if let Some(m) = self.within {
            lower_outside(m, k, self.outside as f32, out);
        }
    }
}

/// The edges of a triangle soup: (boundary edges, bad edges, undirected edges). A directed edge
/// `a → b` used once with no `b → a` is on the boundary; one used more than once is bad (the
/// surface folds or is not consistently oriented). The directed edges are sorted as two lists
/// of undirected keys, by the direction they run, and joined: 8 bytes per edge, so a mesh of
/// tens of millions of triangles is checked in a fraction of what a hash map would take.
fn edge_counts(triangles: &[[u32; 3]]) -> (usize, usize, i64) {
    use rayon::prelude::*;
    let key = |a: u32, b: u32| (u64::from(a.min(b)) << 32) | u64::from(a.max(b));
    let mut forward: Vec<u64> = Vec::new();
    let mut backward: Vec<u64> = Vec::new();
    for t in triangles {
        for n in 0..3 {
            let (a, b) = (t[n], t[(n + 1) % 3]);
            if a < b {
                forward.push(key(a, b));
            } else {
                backward.push(key(a, b));
            }
        }
    }
    forward.par_sort_unstable();
    backward.par_sort_unstable();
    let (f, b) = (&forward, &backward);
    // how many times the key at `at` repeats from there
    let run = |v: &[u64], at: usize| v[at..].iter().take_while(|&&k| k == v[at]).count();
    let (mut boundary, mut bad, mut edges) = (0usize, 0usize, 0i64);
    let mut tally = |nf: usize, nb: usize| {
        edges += 1;
        bad += usize::from(nf > 1) + usize::from(nb > 1);
        boundary += usize::from(nf == 1 && nb == 0) + usize::from(nb == 1 && nf == 0);
    };
    let (mut i, mut j) = (0, 0);
    while i < f.len() || j < b.len() {
        match (f.get(i), b.get(j)) {
            (Some(kf), Some(kb)) if kf == kb => {
                let (nf, nb) = (run(f, i), run(b, j));
                tally(nf, nb);
                i += nf;
                j += nb;
            }
            (Some(kf), Some(kb)) if kf < kb => {
                let nf = run(f, i);
                tally(nf, 0);
                i += nf;
            }
            (Some(_), None) => {
                let nf = run(f, i);
                tally(nf, 0);
                i += nf;
            }
            (_, Some(_)) => {
                let nb = run(b, j);
                tally(0, nb);
                j += nb;
            }
            (None, None) => unreachable!("the loop runs while either list has keys left"),
        }
    }
    (boundary, bad, edges)
}

/// The surface of a scan at an iso-value, inside a label if `within` is given: `iso`, else the
/// scan's one iso-value (ISO-50, or its stated fallback). Voxels outside the label (and
/// outside the grid) read the histogram's background when it lies below the iso-value, else
/// the scan's minimum (at most one below the iso-value). Read through the volume interface
/// ([`SourceField`]), so a store is meshed a few chunk layers at a time. The rule `sutura mesh`
/// and the workstation's mesh export share; returns the mesh and the iso-value used.
pub fn iso_surface(
    source: &dyn crate::volume::VolumeSource,
    iso: Option<f64>,
    within: Option<&BitMask>,
) -> Result<(Mesh, crate::landmarks::pick::IsoValue), MeshError> {
    use crate::landmarks::pick::IsoValue;
    use crate::landmarks::pick_source;
    let read = |e: &dyn std::fmt::Display| MeshError::Invalid(e.to_string());
    if let Some(m) = within
        && m.dims() != source.dims()
    {
        return Err(MeshError::GridMismatch(m.dims(), source.dims()));
    }
    let iso_value = match iso {
        Some(v) => IsoValue::given(v),
        None => pick_source::default_iso_value(source).map_err(|e| read(&e))?,
    };
    let level = iso_value.value;
    let lowest = source.intensity().map_err(|e| read(&e))?.stats.min;
    let outside = match pick_source::iso50(source) {
        Ok(p) if p.background < level => p.background,
        _ => lowest.min(level - 1.0),
    };
    if lowest >= level && within.is_none() {
        return Err(MeshError::Invalid(format!(
            "every voxel is at or above the iso-value {level}: the surface would be the grid's box"
        )));
    }
    let field = SourceField {
        source,
        iso: level,
        outside,
        within,
        failed: std::sync::Mutex::new(None),
    };
    let mesh = march::extract(&field, &source.world_from_voxel());
    if let Some(e) = field
        .failed
        .into_inner()
        .unwrap_or_else(std::sync::PoisonError::into_inner)
    {
        return Err(MeshError::Invalid(e));
    }
    if mesh.triangles.is_empty() {
        return Err(MeshError::Empty(level));
    }
    Ok((mesh, iso_value))
}

/// Plane `k`'s values outside mask `m` lowered to at most `outside`.
fn lower_outside(m: &BitMask, k: usize, outside: f32, out: &mut [f32]) {
    let [nx, ny, _] = m.dims();
    for j in 0..ny {
        let row = m.row(j, k);
        for i in 0..nx {
            if row[i / 64] >> (i % 64) & 1 == 0 {
                let o = &mut out[i + nx * j];
                *o = o.min(outside);
            }
        }
    }
}

/// A label's voxels: 1 inside, 0 outside, surface at ½ (edge midpoints).
pub struct MaskField<'a> {
    pub mask: &'a BitMask,
}

impl march::Field for MaskField<'_> {
    fn dims(&self) -> [usize; 3] {
        self.mask.dims()
    }
    fn iso(&self) -> f64 {
        0.5
    }
    fn outside(&self) -> f64 {
        0.0
    }
    fn plane(&self, k: usize, out: &mut [f32]) {
        let [nx, ny, _] = self.mask.dims();
        for j in 0..ny {
            let row = self.mask.row(j, k);
            for i in 0..nx {
                out[i + nx * j] = f32::from(u8::from(row[i / 64] >> (i % 64) & 1 == 1));
            }
        }
    }
}

/// What a mesh measures.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct MeshReport {
    pub vertices: usize,
    pub triangles: usize,
    /// Sum of the triangles' areas, mm².
    pub area_mm2: f64,
    /// Volume enclosed (divergence theorem over the triangles), mm³; meaningful when closed.
    pub volume_mm3: f64,
    /// Connected pieces (triangles sharing vertices).
    pub pieces: usize,
    /// Every edge has exactly two triangles, traversed in opposite directions.
    pub closed: bool,
    /// Edges with one triangle.
    pub boundary_edges: usize,
    /// Edges with more than two triangles, or two in the same direction.
    pub bad_edges: usize,
    /// `V − E + F` over the vertices triangles use (2 per closed piece of sphere topology).
    pub euler_characteristic: i64,
}

impl Mesh {
    /// Area, volume, pieces, closedness and Euler characteristic.
    #[must_use]
    pub fn report(&self) -> MeshReport {
        let v = &self.vertices;
        let (mut area, mut volume) = (0.0, 0.0);
        for t in &self.triangles {
            let [a, b, c] = t.map(|n| nalgebra::Vector3::from(v[n as usize]));
            area += 0.5 * (b - a).cross(&(c - a)).norm();
            volume += a.dot(&b.cross(&c)) / 6.0;
        }
        let (boundary, bad, edges) = edge_counts(&self.triangles);
        // pieces: union–find over vertices of each triangle
        let mut parent: Vec<u32> = (0..v.len() as u32).collect();
        let mut used = vec![false; v.len()];
        for t in &self.triangles {
            for &n in t {
                used[n as usize] = true;
            }
            let r0 = find(&mut parent, t[0]);
            for &n in &t[1..] {
                let r = find(&mut parent, n);
                if r != r0 {
                    parent[r as usize] = r0;
                }
            }
        }
        let used_count = used.iter().filter(|&&u| u).count();
        let pieces = (0..v.len() as u32)
            .filter(|&n| used[n as usize] && find(&mut parent, n) == n)
            .count();
        MeshReport {
            vertices: v.len(),
            triangles: self.triangles.len(),
            area_mm2: area,
            volume_mm3: volume,
            pieces,
            closed: boundary == 0 && bad == 0 && !self.triangles.is_empty(),
            boundary_edges: boundary,
            bad_edges: bad,
            euler_characteristic: used_count as i64 - edges + self.triangles.len() as i64,
        }
    }

    /// Reduces the mesh to about `target_triangles` triangles by quadric-error edge collapse
    /// (meshoptimizer's `simplify`), keeping the mesh's topology and its border vertices; a
    /// collapse whose error would exceed `max_error_mm` is not made. Unused vertices are
    /// dropped. Returns the largest error reached, mm.
    pub fn decimate(&mut self, target_triangles: usize, max_error_mm: f64) -> f64 {
        if target_triangles >= self.triangles.len() {
            return 0.0;
        }
        let positions: Vec<[f32; 3]> = self.vertices.iter().map(|p| p.map(|x| x as f32)).collect();
        let indices: Vec<u32> = self.triangles.iter().flatten().copied().collect();
        let mut error = 0.0f32;
        let out = meshopt::simplify_decoder(
            &indices,
            &positions,
            target_triangles * 3,
            max_error_mm as f32,
            meshopt::SimplifyOptions::LockBorder | meshopt::SimplifyOptions::ErrorAbsolute,
            Some(&mut error),
        );
        self.triangles = out.chunks_exact(3).map(|c| [c[0], c[1], c[2]]).collect();
        self.drop_unused_vertices();
        f64::from(error)
    }

    /// Removes vertices no triangle uses, renumbering the rest in order.
    pub fn drop_unused_vertices(&mut self) {
        let mut new_id = vec![u32::MAX; self.vertices.len()];
        for t in &self.triangles {
            for &n in t {
                new_id[n as usize] = 0;
            }
        }
        let mut kept = Vec::new();
        for (n, id) in new_id.iter_mut().enumerate() {
            if *id == 0 {
                *id = kept.len() as u32;
                kept.push(self.vertices[n]);
            }
        }
        for t in &mut self.triangles {
            *t = t.map(|n| new_id[n as usize]);
        }
        self.vertices = kept;
    }
}

#[cfg(test)]
mod tests;

/// The root of `x` in a union–find forest, halving the path on the way.
fn find(p: &mut [u32], mut x: u32) -> u32 {
    while p[x as usize] != x {
        p[x as usize] = p[p[x as usize] as usize];
        x = p[x as usize];
    }
    x
}
