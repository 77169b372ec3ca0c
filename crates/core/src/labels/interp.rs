//! Interpolation of a label between the slices a preparator drew.
//!
//! Along an axis, the slices holding the label are the drawn ones. For each run of empty slices
//! between two drawn slices `a < b`, every slice `c` between them gets the voxels where the
//! linear blend of the two slices' signed distance maps is at most zero:
//! `(1 − t)·d_a + t·d_b ≤ 0` with `t = (c − a)/(b − a)`. `d` is the 2-D Euclidean distance in
//! millimetres (in-plane voxel sizes honoured) from a voxel centre to the nearest voxel of the
//! other side: positive outside the drawn shape, negative inside. The exact squared distance
//! transform is the separable lower-envelope method of Felzenszwalb and Huttenlocher
//! ("Distance transforms of sampled functions", Theory of Computing 8, 2012).
//!
//! Slices beyond the first and last drawn slice are left alone; so are drawn slices.

use rayon::prelude::*;

use super::{BitMask, LabelVolume, LabelsError};

/// The voxels interpolation adds to label `value` along `axis` (0 = i, 1 = j, 2 = k), and the
/// drawn slices it used.
pub fn interpolate(
    labels: &LabelVolume,
    value: u8,
    axis: usize,
) -> Result<(BitMask, Vec<usize>), LabelsError> {
    if axis > 2 {
        return Err(LabelsError::Invalid(format!("axis {axis}")));
    }
    let dims = labels.dims();
    let spacing = labels.spacing_mm;
    let mask = labels.mask_of(value);
    let (ua, va) = plane_axes(axis);
    let (w, h) = (dims[ua], dims[va]);
    let slice = |c: usize| -> Vec<bool> {
        let mut out = vec![false; w * h];
        for v in 0..h {
            for u in 0..w {
                let mut p = [0; 3];
                p[axis] = c;
                p[ua] = u;
                p[va] = v;
                out[u + w * v] = mask.get(p[0], p[1], p[2]);
            }
        }
        out
    };
    let drawn: Vec<usize> = (0..dims[axis])
        .filter(|&c| slice(c).iter().any(|&b| b))
        .collect();
    if drawn.len() < 2 {
        return Err(LabelsError::Invalid(format!(
            "interpolation needs the label on at least two {} slices; it is on {}",
            ["i", "j", "k"][axis],
            drawn.len()
        )));
    }
    let (su, sv) = (spacing[ua], spacing[va]);
    let gaps: Vec<(usize, usize)> = drawn
        .windows(2)
        .filter(|p| p[1] - p[0] > 1)
        .map(|p| (p[0], p[1]))
        .collect();
    let filled: Vec<(usize, Vec<bool>)> = gaps
        .par_iter()
        .flat_map_iter(|&(a, b)| {
            let da = signed_distance(&slice(a), w, h, su, sv);
            let db = signed_distance(&slice(b), w, h, su, sv);
            (a + 1..b)
                .map(|c| {
                    let t = (c - a) as f64 / (b - a) as f64;
                    let inside = da
                        .iter()
                        .zip(&db)
                        .map(|(x, y)| (1.0 - t) * x + t * y <= 0.0)
                        .collect::<Vec<bool>>();
                    (c, inside)
                })
                .collect::<Vec<_>>()
        })
        .collect();
    let mut out = BitMask::new(dims);
    for (c, inside) in filled {
        for v in 0..h {
            for u in 0..w {
                if inside[u + w * v] {
                    let mut p = [0; 3];
                    p[axis] = c;
                    p[ua] = u;
                    p[va] = v;
                    out.set(p[0], p[1], p[2], true);
                }
            }
        }
    }
    Ok((out, drawn))
}

/// The in-plane axes of a slice normal to `axis`.
#[must_use]
pub fn plane_axes(axis: usize) -> (usize, usize) {
    match axis {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    }
}

/// Signed distance (mm) of a 2-D shape: distance to the shape outside it, minus the distance
/// to the outside inside it. A shape filling the whole plane reads −∞-like (−1e30).
#[must_use]
pub fn signed_distance(inside: &[bool], w: usize, h: usize, su: f64, sv: f64) -> Vec<f64> {
    let to_inside = squared_distance_2d(inside, w, h, su, sv, true);
    let to_outside = squared_distance_2d(inside, w, h, su, sv, false);
    inside
        .iter()
        .enumerate()
        .map(|(n, &b)| {
            if b {
                -to_outside[n].min(1e60).sqrt()
            } else {
                to_inside[n].min(1e60).sqrt()
            }
        })
        .collect()
}

const FAR: f64 = 1e300;

/// Squared distance from each pixel to the nearest pixel where `inside == target`.
fn squared_distance_2d(
    inside: &[bool],
    w: usize,
    h: usize,
    su: f64,
    sv: f64,
    target: bool,
) -> Vec<f64> {
    let mut g: Vec<f64> = inside
        .iter()
        .map(|&b| if b == target { 0.0 } else { FAR })
        .collect();
    let mut col = vec![0.0; h];
    let mut out = vec![0.0; h.max(w)];
    for u in 0..w {
        for v in 0..h {
            col[v] = g[u + w * v];
        }
        lower_envelope(&col, sv, &mut out[..h]);
        for v in 0..h {
            g[u + w * v] = out[v];
        }
    }
    let mut row = vec![0.0; w];
    for v in 0..h {
        row.copy_from_slice(&g[w * v..w * (v + 1)]);
        lower_envelope(&row, su, &mut out[..w]);
        g[w * v..w * (v + 1)].copy_from_slice(&out[..w]);
    }
    g
}

/// `out[p] = min_q ((p − q)·s)² + f[q]`, by the lower envelope of parabolas.
pub(crate) fn lower_envelope(f: &[f64], s: f64, out: &mut [f64]) {
    let n = f.len();
    if n == 0 {
        return;
    }
    let mut v = vec![0usize; n];
    let mut z = vec![0.0f64; n + 1];
    let mut k = 0usize;
    let x = |q: usize| q as f64 * s;
    // only finite sites carry parabolas
    let first = f.iter().position(|&y| y < FAR);
    let Some(first) = first else {
        out.fill(FAR);
        return;
    };
    v[0] = first;
    z[0] = f64::NEG_INFINITY;
    z[1] = f64::INFINITY;
    for q in first + 1..n {
        if f[q] >= FAR {
            continue;
        }
        loop {
            let p = v[k];
            let sct = ((f[q] + x(q) * x(q)) - (f[p] + x(p) * x(p))) / (2.0 * (x(q) - x(p)));
            if sct <= z[k] && k > 0 {
                k -= 1;
            } else if sct <= z[k] {
                // k == 0 and z[0] = −∞ never holds; kept for clarity
                k = 0;
                v[0] = q;
                z[1] = f64::INFINITY;
                break;
            } else {
                k += 1;
                v[k] = q;
                z[k] = sct;
                z[k + 1] = f64::INFINITY;
                break;
            }
        }
    }
    let mut k = 0;
    for (p, o) in out.iter_mut().enumerate().take(n) {
        while z[k + 1] < x(p) {
            k += 1;
        }
        let d = x(p) - x(v[k]);
        *o = d * d + f[v[k]];
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::labels::Combine;

    #[test]
    fn distances_match_brute_force() {
        let (w, h) = (23, 17);
        let inside: Vec<bool> = (0..w * h).map(|n| (n * 7919) % 13 == 0).collect();
        let d = squared_distance_2d(&inside, w, h, 0.3, 0.7, true);
        for v in 0..h {
            for u in 0..w {
                let mut best = f64::INFINITY;
                for q in 0..h {
                    for p in 0..w {
                        if inside[p + w * q] {
                            let du = (u as f64 - p as f64) * 0.3;
                            let dv = (v as f64 - q as f64) * 0.7;
                            best = best.min(du * du + dv * dv);
                        }
                    }
                }
                assert!((d[u + w * v] - best).abs() < 1e-9, "{u} {v}");
            }
        }
    }

    #[test]
    fn discs_between_two_slices_take_the_blended_radius() {
        // discs of radius 10 and 30 voxels on slices 0 and 20: the slice at t has about radius
        // 10 + 20t (signed distances of discs blend linearly along their common centre)
        let dims = [80, 80, 21];
        let mut lv = LabelVolume::new(dims, [0.1, 0.1, 0.5]);
        let v = lv.add_label("a").unwrap();
        let disc = |r: f64| {
            BitMask::from_fn(dims, move |i, j, _| {
                (i as f64 - 40.0).powi(2) + (j as f64 - 40.0).powi(2) <= r * r
            })
        };
        let mut m = disc(10.0);
        m.keep_box(&[0..80, 0..80, 0..1]);
        let mut m2 = disc(30.0);
        m2.keep_box(&[0..80, 0..80, 20..21]);
        m.or_with(&m2);
        lv.apply(&m, v, Combine::Add, false).unwrap();
        let (add, drawn) = interpolate(&lv, v, 2).unwrap();
        assert_eq!(drawn, vec![0, 20]);
        for c in 1..20 {
            let mut s = add.clone();
            s.keep_box(&[0..80, 0..80, c..c + 1]);
            let r = 10.0 + 20.0 * c as f64 / 20.0;
            let expect = std::f64::consts::PI * r * r;
            let got = s.count() as f64;
            assert!(
                (got - expect).abs() < 0.03 * expect + 8.0,
                "slice {c}: {got} vs {expect}"
            );
        }
        assert!(interpolate(&lv, 7, 2).is_err());
    }
}
