//! Iso-surface extraction by marching cubes, slab by slab with stitched seams.
//!
//! Cells are the cubes between eight neighbouring voxel centres. The grid is padded by one
//! layer of voxels reading the field's outside value, so every surface is closed. A voxel is
//! inside when its field value is at least the iso-value; each cell edge whose ends differ gets
//! one vertex, at the linear interpolation of the iso-value along the edge (in voxel
//! coordinates, mapped to world millimetres by `world_from_voxel`), shared by every cell that
//! has the edge.
//!
//! Triangulation: the table is built here, once, from a rule on the cube's faces rather than
//! typed in. On each face the crossing points are joined by segments; a face whose inside
//! corners lie on a diagonal is resolved by the asymptotic decider (the bilinear interpolant's
//! saddle value: inside corners joined when `a·c > b·d` for iso-relative values, Nielson and
//! Hamann, "The asymptotic decider", IEEE Visualization 1991). Each segment is oriented so the
//! inside lies on its right seen from outside the cube; the segments of a cell then chain into
//! closed loops, each fanned into triangles whose normals point from inside to outside. Since two
//! cells sharing a face see the same corner values, they make the same segments on it: the
//! surface has no cracks, every edge has exactly two triangles, and the mesh is closed.
//!
//! Large volumes: the cell layers along `k` are cut into slabs processed in parallel, each with
//! two planes of edge-to-vertex tables (memory `O(nx·ny)` per slab besides the output). The
//! vertices on a slab's first plane are the previous slab's last-plane vertices: stitching maps
//! them by edge and drops the copies, so the seams are exact.

use std::collections::HashMap;
use std::sync::OnceLock;

use rayon::prelude::*;

use super::Mesh;
use crate::geometry::{Affine3, VoxelPoint};

/// Corner `n` of a cell sits at offset `(n & 1, n >> 1 & 1, n >> 2 & 1)`.
const CORNER: [[usize; 3]; 8] = [
    [0, 0, 0],
    [1, 0, 0],
    [0, 1, 0],
    [1, 1, 0],
    [0, 0, 1],
    [1, 0, 1],
    [0, 1, 1],
    [1, 1, 1],
];

/// The 12 edges as corner pairs: 4 along `i`, 4 along `j`, 4 along `k`.
const EDGE: [(usize, usize); 12] = [
    (0, 1),
    (2, 3),
    (4, 5),
    (6, 7),
    (0, 2),
    (1, 3),
    (4, 6),
    (5, 7),
    (0, 4),
    (1, 5),
    (2, 6),
    (3, 7),
];

/// Faces: corners in cyclic order, and the outward normal.
const FACE: [([usize; 4], [i32; 3]); 6] = [
    ([0, 2, 6, 4], [-1, 0, 0]),
    ([1, 3, 7, 5], [1, 0, 0]),
    ([0, 1, 5, 4], [0, -1, 0]),
    ([2, 3, 7, 6], [0, 1, 0]),
    ([0, 1, 3, 2], [0, 0, -1]),
    ([4, 5, 7, 6], [0, 0, 1]),
];

fn edge_of(a: usize, b: usize) -> usize {
    EDGE.iter()
        .position(|&(x, y)| (x, y) == (a.min(b), a.max(b)))
        .expect("corners of a face edge")
}

/// Triangles (as edge triples) for each case (8 corner bits) and face decision bits (6 bits:
/// for face `f`, bit `f` set when its diagonal inside corners are joined).
struct Table {
    /// `start[key]..start[key + 1]` in `tris`; `key = case | decisions << 8`.
    start: Vec<u32>,
    tris: Vec<[u8; 3]>,
}

fn table() -> &'static Table {
    static T: OnceLock<Table> = OnceLock::new();
    T.get_or_init(|| {
        let mut start = Vec::with_capacity(256 * 64 + 1);
        let mut tris = Vec::new();
        for decisions in 0..64u32 {
            for case in 0..256u32 {
                start.push(tris.len() as u32);
                tris.extend(triangulate(case as u8, decisions as u8));
            }
        }
        start.push(tris.len() as u32);
        Table { start, tris }
    })
}

/// Is face `f` ambiguous for `case` (inside corners on one diagonal only)?
fn ambiguous(case: u8, f: usize) -> bool {
    let c = FACE[f].0;
    let inside = |n: usize| case >> c[n] & 1 == 1;
    inside(0) == inside(2) && inside(1) == inside(3) && inside(0) != inside(1)
}

/// The triangles of one cell configuration, built from face segments (see the module docs).
fn triangulate(case: u8, decisions: u8) -> Vec<[u8; 3]> {
    let inside = |n: usize| case >> n & 1 == 1;
    let mid = |e: usize| {
        let (a, b) = EDGE[e];
        [0, 1, 2].map(|x| 0.5 * (CORNER[a][x] + CORNER[b][x]) as f64)
    };
    let mut next = [usize::MAX; 12];
    for (f, (c, normal)) in FACE.iter().enumerate() {
        let crossed: Vec<usize> = (0..4)
            .filter(|&n| inside(c[n]) != inside(c[(n + 1) % 4]))
            .map(|n| edge_of(c[n], c[(n + 1) % 4]))
            .collect();
        let pairs: Vec<(usize, usize)> = match crossed.len() {
            0 => vec![],
            2 => vec![(crossed[0], crossed[1])],
            4 => {
                // corners c[0], c[2] share a state; each segment cuts off one corner
                let joined = decisions >> f & 1 == 1;
                // the corners the segments cut off: the inside ones when separated
                let cut_inside = !joined;
                let cut: Vec<usize> = (0..4).filter(|&n| inside(c[n]) == cut_inside).collect();
                cut.iter()
                    .map(|&n| (edge_of(c[n], c[(n + 3) % 4]), edge_of(c[n], c[(n + 1) % 4])))
                    .collect()
            }
            _ => unreachable!("a square has an even number of sign changes"),
        };
        for (e1, e2) in pairs {
            let (p, q) = (mid(e1), mid(e2));
            let d = [q[0] - p[0], q[1] - p[1], q[2] - p[2]];
            let m = normal.map(f64::from);
            // side of each face corner: sign of ((q − p) × (corner − p)) · m
            let side = |n: usize| {
                let r = [0, 1, 2].map(|x| CORNER[c[n]][x] as f64 - p[x]);
                let x = [
                    d[1] * r[2] - d[2] * r[1],
                    d[2] * r[0] - d[0] * r[2],
                    d[0] * r[1] - d[1] * r[0],
                ];
                x[0] * m[0] + x[1] * m[1] + x[2] * m[2]
            };
            let left: Vec<usize> = (0..4).filter(|&n| side(n) > 0.0).collect();
            let right: Vec<usize> = (0..4).filter(|&n| side(n) < 0.0).collect();
            let (few, few_is_left) = if left.len() <= right.len() {
                (left[0], true)
            } else {
                (right[0], false)
            };
            // inside must lie on the right (negative side) of from → to
            let few_inside = inside(c[few]);
            let forward = few_inside != few_is_left;
            let (from, to) = if forward { (e1, e2) } else { (e2, e1) };
            debug_assert_eq!(next[from], usize::MAX);
            next[from] = to;
        }
    }
    let mut out = Vec::new();
    let mut used = [false; 12];
    for s in 0..12 {
        if next[s] == usize::MAX || used[s] {
            continue;
        }
        let mut lp = vec![s];
        used[s] = true;
        let mut e = next[s];
        while e != s {
            used[e] = true;
            lp.push(e);
            e = next[e];
        }
        for n in 1..lp.len() - 1 {
            out.push([lp[0] as u8, lp[n] as u8, lp[n + 1] as u8]);
        }
    }
    out
}

/// A scalar field on the voxel grid, read plane by plane.
pub trait Field: Sync {
    fn dims(&self) -> [usize; 3];
    /// The iso-value.
    fn iso(&self) -> f64;
    /// The value every voxel outside the grid reads (below the iso-value).
    fn outside(&self) -> f64;
    /// Writes plane `k`'s values into `out` (`nx·ny`, `i` fastest).
    fn plane(&self, k: usize, out: &mut [f32]);
}

/// One slab's output: vertices, triangles (local ids), and the vertices on its first and last
/// planes by edge key.
struct Slab {
    vertices: Vec<[f64; 3]>,
    triangles: Vec<[u32; 3]>,
    first: Vec<(u64, u32)>,
    last: Vec<(u64, u32)>,
}

/// Cell layers per slab.
const SLAB_LAYERS: usize = 16;

/// The iso-surface of `field` in world millimetres.
#[must_use]
pub fn extract(field: &dyn Field, world_from_voxel: &Affine3) -> Mesh {
    extract_in_slabs(field, world_from_voxel, SLAB_LAYERS)
}

/// [`extract`] with `slab_layers` cell layers per slab (any value gives the same mesh).
#[must_use]
pub fn extract_in_slabs(field: &dyn Field, world_from_voxel: &Affine3, slab_layers: usize) -> Mesh {
    let [_, _, nz] = field.dims();
    // cell layers: z from −1 (padding) to nz − 1 (the last plane and the padding above)
    let layers: Vec<isize> = (-1..nz as isize).collect();
    let flip = world_from_voxel.linear().determinant() < 0.0;
    let slab_layers = slab_layers.max(1);
    // a few slabs per worker at a time, stitched onto the mesh as they finish: the slabs'
    // own copies of their vertices and triangles never add up to a second mesh
    let group = slab_layers * 4 * rayon::current_num_threads().max(1);
    let mut mesh = Mesh::default();
    let mut prev_last: HashMap<u64, u32> = HashMap::new();
    for layers in layers.chunks(group) {
        let slabs: Vec<Slab> = layers
            .par_chunks(slab_layers)
            .map(|ls| slab(field, world_from_voxel, ls[0], ls[ls.len() - 1] + 1, flip))
            .collect();
        stitch(&mut mesh, &mut prev_last, slabs);
    }
    mesh
}

/// Appends slabs (in order) to `mesh`, sharing the vertices on the seam with the slab before
/// (`prev_last`: its last plane's vertices by edge key, updated to the last slab's).
fn stitch(mesh: &mut Mesh, prev_last: &mut HashMap<u64, u32>, slabs: Vec<Slab>) {
    for s in slabs {
        let shared: HashMap<u32, u32> = s
            .first
            .iter()
            .filter_map(|(key, local)| prev_last.get(key).map(|g| (*local, *g)))
            .collect();
        let mut remap = vec![0u32; s.vertices.len()];
        for (local, v) in s.vertices.into_iter().enumerate() {
            remap[local] = if let Some(&g) = shared.get(&(local as u32)) {
                g
            } else {
                mesh.vertices.push(v);
                (mesh.vertices.len() - 1) as u32
            };
        }
        mesh.triangles
            .extend(s.triangles.iter().map(|t| t.map(|v| remap[v as usize])));
        *prev_last = s
            .last
            .iter()
            .map(|(key, local)| (*key, remap[*local as usize]))
            .collect();
    }
}

/// Cells of layers `z0..z1` (layer `z` spans planes `z` and `z + 1`; planes −1 and `nz` are
/// the padding).
#[allow(
    clippy::too_many_lines,
    reason = "the inner loop of extraction, kept in one piece for speed"
)]
fn slab(field: &dyn Field, world_from_voxel: &Affine3, z0: isize, z1: isize, flip: bool) -> Slab {
    let [nx, ny, nz] = field.dims();
    let iso = field.iso() as f32;
    let outside = field.outside() as f32;
    // padded planes: (nx + 2) × (ny + 2), padded index (i + 1, j + 1)
    let (px, py) = (nx + 2, ny + 2);
    let read_plane = |z: isize, out: &mut Vec<f32>, scratch: &mut Vec<f32>| {
        out.clear();
        out.resize(px * py, outside);
        if z < 0 || z >= nz as isize {
            return;
        }
        scratch.resize(nx * ny, 0.0);
        field.plane(z as usize, scratch);
        for j in 0..ny {
            out[(j + 1) * px + 1..(j + 1) * px + 1 + nx]
                .copy_from_slice(&scratch[j * nx..(j + 1) * nx]);
        }
    };
    let table = table();
    let mut scratch = Vec::new();
    let (mut lo, mut hi) = (Vec::new(), Vec::new());
    read_plane(z0, &mut lo, &mut scratch);
    // edge → vertex tables: x and y edges of the low and high planes, z edges of the layer
    let none = u32::MAX;
    let mut xe_lo = vec![none; px * py];
    let mut ye_lo = vec![none; px * py];
    let mut xe_hi = vec![none; px * py];
    let mut ye_hi = vec![none; px * py];
    let mut ze = vec![none; px * py];
    let mut out = Slab {
        vertices: Vec::new(),
        triangles: Vec::new(),
        first: Vec::new(),
        last: Vec::new(),
    };
    let to_world = |p: [f64; 3]| {
        let w = world_from_voxel.voxel_to_world(VoxelPoint::new(p[0], p[1], p[2]));
        [w.0.x, w.0.y, w.0.z]
    };
    // inside bits of each padded row, 64 cells at a time, to skip cells with no crossing
    let wpx = px.div_ceil(64);
    let bits_of = |plane: &[f32], out: &mut Vec<u64>| {
        out.clear();
        out.resize(wpx * py, 0);
        for jj in 0..py {
            let row = &plane[jj * px..(jj + 1) * px];
            for (w, chunk) in row.chunks(64).enumerate() {
                let mut word = 0u64;
                for (b, v) in chunk.iter().enumerate() {
                    word |= u64::from(*v >= iso) << b;
                }
                out[jj * wpx + w] = word;
            }
        }
    };
    let (mut inside_lo, mut inside_hi) = (Vec::new(), Vec::new());
    bits_of(&lo, &mut inside_lo);
    let inside = |bits: &[u64], n: usize| {
        let (jj, ii) = (n / px, n % px);
        bits[jj * wpx + ii / 64] >> (ii % 64) & 1 == 1
    };
    for z in z0..z1 {
        read_plane(z + 1, &mut hi, &mut scratch);
        bits_of(&hi, &mut inside_hi);
        ze.fill(none);
        xe_hi.fill(none);
        ye_hi.fill(none);
        for jj in 0..py - 1 {
            let r0 = jj * px;
            let r1 = r0 + px;
            for w in 0..wpx {
                let rows = [
                    inside_lo[jj * wpx + w],
                    inside_lo[(jj + 1) * wpx + w],
                    inside_hi[jj * wpx + w],
                    inside_hi[(jj + 1) * wpx + w],
                ];
                let next = |q: usize| {
                    [
                        inside_lo[q * wpx + w + 1],
                        inside_lo[(q + 1) * wpx + w + 1],
                        inside_hi[q * wpx + w + 1],
                        inside_hi[(q + 1) * wpx + w + 1],
                    ]
                };
                let (any, all) = (
                    rows.iter().fold(0, |a, r| a | r),
                    rows.iter().fold(u64::MAX, |a, r| a & r),
                );
                // the cell at bit b spans corners b and b + 1
                let carry = if w + 1 < wpx {
                    let n = next(jj);
                    (
                        n.iter().fold(0, |a, r| a | r) & 1,
                        n.iter().fold(u64::MAX, |a, r| a & r) & 1,
                    )
                } else {
                    (0, 0)
                };
                let any2 = any | (any >> 1 | carry.0 << 63);
                let all2 = all & (all >> 1 | carry.1 << 63);
                let mut mixed = any2 & !all2;
                // cells exist for ii < px − 1
                let last = px - 1;
                if (w + 1) * 64 > last {
                    let keep = last - w * 64;
                    mixed &= if keep >= 64 {
                        u64::MAX
                    } else {
                        (1u64 << keep) - 1
                    };
                }
                while mixed != 0 {
                    let ii = w * 64 + mixed.trailing_zeros() as usize;
                    mixed &= mixed - 1;
                    let n = [r0 + ii, r0 + ii + 1, r1 + ii, r1 + ii + 1];
                    let mut case = 0u8;
                    for (b, &m) in n.iter().enumerate() {
                        case |= u8::from(inside(&inside_lo, m)) << b;
                        case |= u8::from(inside(&inside_hi, m)) << (b + 4);
                    }
                    if case == 0 || case == 255 {
                        continue;
                    }
                    let vals = [
                        lo[n[0]], lo[n[1]], lo[n[2]], lo[n[3]], hi[n[0]], hi[n[1]], hi[n[2]],
                        hi[n[3]],
                    ];
                    let mut decisions = 0u32;
                    for (f, face) in FACE.iter().enumerate() {
                        if ambiguous(case, f) {
                            let c = face.0;
                            let r = |q: usize| f64::from(vals[c[q]]) - f64::from(iso);
                            // joined when the inside pair's product beats the outside pair's
                            // (the saddle of the bilinear interpolant is inside); ties: separate
                            let c0_inside = case >> c[0] & 1 == 1;
                            let (p_in, p_out) = if c0_inside {
                                (r(0) * r(2), r(1) * r(3))
                            } else {
                                (r(1) * r(3), r(0) * r(2))
                            };
                            if p_in > p_out {
                                decisions |= 1 << f;
                            }
                        }
                    }
                    let key = case as usize | (decisions as usize) << 8;
                    let (s, e) = (table.start[key] as usize, table.start[key + 1] as usize);
                    let mut ids = [none; 12];
                    for t in &table.tris[s..e] {
                        let mut tri = [0u32; 3];
                        for (slot, &edge) in tri.iter_mut().zip(t) {
                            let edge = edge as usize;
                            if ids[edge] == none {
                                let (a, b) = EDGE[edge];
                                // which table holds this edge, at which padded cell index
                                let (tab, at): (&mut Vec<u32>, usize) = match edge {
                                    0 => (&mut xe_lo, r0 + ii),
                                    1 => (&mut xe_lo, r1 + ii),
                                    2 => (&mut xe_hi, r0 + ii),
                                    3 => (&mut xe_hi, r1 + ii),
                                    4 => (&mut ye_lo, r0 + ii),
                                    5 => (&mut ye_lo, r0 + ii + 1),
                                    6 => (&mut ye_hi, r0 + ii),
                                    7 => (&mut ye_hi, r0 + ii + 1),
                                    8 => (&mut ze, r0 + ii),
                                    9 => (&mut ze, r0 + ii + 1),
                                    10 => (&mut ze, r1 + ii),
                                    _ => (&mut ze, r1 + ii + 1),
                                };
                                if tab[at] == none {
                                    let (va, vb) = (f64::from(vals[a]), f64::from(vals[b]));
                                    let t = if (vb - va).abs() > 0.0 {
                                        ((f64::from(iso) - va) / (vb - va)).clamp(0.0, 1.0)
                                    } else {
                                        0.5
                                    };
                                    let ca = CORNER[a];
                                    let cb = CORNER[b];
                                    let p = [0, 1, 2].map(|x| {
                                        let base = [ii as f64 - 1.0, jj as f64 - 1.0, z as f64][x];
                                        base + ca[x] as f64 + t * (cb[x] as f64 - ca[x] as f64)
                                    });
                                    let id = out.vertices.len() as u32;
                                    out.vertices.push(to_world(p));
                                    tab[at] = id;
                                    // vertices on the slab's first or last plane, for stitching
                                    let plane_z = if edge < 8 {
                                        Some(if edge == 2 || edge == 3 || edge == 6 || edge == 7 {
                                            z + 1
                                        } else {
                                            z
                                        })
                                    } else {
                                        None
                                    };
                                    if let Some(pz) = plane_z {
                                        let axis = u64::from(edge >= 4);
                                        let key = ((pz + 1) as u64 * (px * py) as u64 + at as u64)
                                            * 2
                                            + axis;
                                        if pz == z0 {
                                            out.first.push((key, id));
                                        }
                                        if pz == z1 {
                                            out.last.push((key, id));
                                        }
                                    }
                                }
                                ids[edge] = tab[at];
                            }
                            *slot = ids[edge];
                        }
                        if flip {
                            tri.swap(1, 2);
                        }
                        out.triangles.push(tri);
                    }
                }
            }
        }
        std::mem::swap(&mut lo, &mut hi);
        std::mem::swap(&mut inside_lo, &mut inside_hi);
        std::mem::swap(&mut xe_lo, &mut xe_hi);
        std::mem::swap(&mut ye_lo, &mut ye_hi);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_configuration_gives_closed_loops() {
        // each crossed edge appears in exactly one loop, so each triangle edge on a face has one
        // partner in the neighbouring cell; here: per cell, the count of loop vertices equals
        // the crossed edges
        for decisions in 0..64u8 {
            for case in 0..=255u8 {
                let tris = triangulate(case, decisions);
                let crossed = EDGE
                    .iter()
                    .filter(|&&(a, b)| (case >> a & 1) != (case >> b & 1))
                    .count();
                let mut used: Vec<u8> = tris.iter().flatten().copied().collect();
                used.sort_unstable();
                used.dedup();
                assert_eq!(
                    used.len(),
                    crossed,
                    "case {case:08b} decisions {decisions:06b}"
                );
            }
        }
        // one inside corner: one triangle facing away from it
        assert_eq!(triangulate(1, 0), vec![[0, 4, 8]]);
    }
}
