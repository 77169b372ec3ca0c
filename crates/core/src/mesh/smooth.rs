//! Smoothing that keeps volume: Taubin's λ|μ filter.
//!
//! Each iteration moves every vertex by `λ·Δv` and then by `μ·Δv` with `μ < −λ < 0`, where
//! `Δv` is the umbrella Laplacian (the mean of the vertex's neighbours minus the vertex). The
//! first step smooths and shrinks, the second inflates; together they pass low spatial
//! frequencies unchanged and damp high ones, so the staircase of a voxel surface goes away
//! without the steady shrinking of plain Laplacian smoothing (G. Taubin, "A signal processing
//! approach to fair surface design", SIGGRAPH 1995). Defaults λ = 0.5, μ = −0.53 (pass-band
//! frequency `1/λ + 1/μ ≈ 0.11`, a common choice). Vertices on a border (edges with one
//! triangle) stay where they are.

use rayon::prelude::*;

use super::Mesh;

/// λ of [`taubin`].
pub const LAMBDA: f64 = 0.5;
/// μ of [`taubin`].
pub const MU: f64 = -0.53;

/// Runs `iterations` λ|μ pairs.
pub fn taubin(mesh: &mut Mesh, iterations: usize) {
    if iterations == 0 || mesh.triangles.is_empty() {
        return;
    }
    let n = mesh.vertices.len();
    // neighbours from the edges, and border vertices
    let mut pairs: Vec<(u32, u32)> = Vec::with_capacity(mesh.triangles.len() * 6);
    for t in &mesh.triangles {
        for e in 0..3 {
            let (a, b) = (t[e], t[(e + 1) % 3]);
            pairs.push((a, b));
            pairs.push((b, a));
        }
    }
    pairs.par_sort_unstable();
    let mut border = vec![false; n];
    let mut start = vec![0u32; n + 1];
    let mut adj: Vec<u32> = Vec::with_capacity(pairs.len() / 2);
    let mut k = 0;
    while k < pairs.len() {
        let mut m = k;
        while m < pairs.len() && pairs[m] == pairs[k] {
            m += 1;
        }
        // an interior edge appears twice in each direction (once per triangle)
        if m - k == 1 {
            border[pairs[k].0 as usize] = true;
        }
        adj.push(pairs[k].1);
        start[pairs[k].0 as usize + 1] += 1;
        k = m;
    }
    for v in 0..n {
        start[v + 1] += start[v];
    }
    let mut next = mesh.vertices.clone();
    for _ in 0..iterations {
        for factor in [LAMBDA, MU] {
            let cur = &mesh.vertices;
            next.par_iter_mut().enumerate().for_each(|(v, out)| {
                let nb = &adj[start[v] as usize..start[v + 1] as usize];
                if nb.is_empty() || border[v] {
                    *out = cur[v];
                    return;
                }
                let mut mean = [0.0; 3];
                for &u in nb {
                    for a in 0..3 {
                        mean[a] += cur[u as usize][a];
                    }
                }
                let inv = 1.0 / nb.len() as f64;
                *out = [0, 1, 2].map(|a| cur[v][a] + factor * (mean[a] * inv - cur[v][a]));
            });
            std::mem::swap(&mut mesh.vertices, &mut next);
        }
    }
}
