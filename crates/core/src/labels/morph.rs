//! Erosion, dilation, opening and closing of a mask by a ball given in millimetres.
//!
//! The structuring element is the set of voxel offsets `(di, dj, dk)` whose physical length
//! `√((di·sx)² + (dj·sy)² + (dk·sz)²)` is at most the radius: a ball in the world, an
//! ellipsoid of voxels when voxels are anisotropic ([`ball_offsets`]). Outside the grid counts
//! as unset for both erosion and dilation (so an opening or closing trims what touches the
//! grid's faces), the convention of `scipy.ndimage`'s `binary_*` functions with their default
//! `border_value=0`.
//!
//! The ball is a stack of runs along `i`: for each `(dj, dk)` the offsets `di` in
//! `−w(dj, dk)..=w(dj, dk)`. A row of the result is the AND (erosion) or OR (dilation) over
//! `(dj, dk)` of the source row `(j + dj, k + dk)` eroded or dilated along `i` by `w`, which
//! works 64 voxels at a time on the packed rows; a 1-D erosion by `w` takes `log₂(2w + 1)`
//! shifted ANDs. Planes of the result are computed in parallel, only within the mask's box
//! (grown by the radius for a dilation).

use std::collections::BTreeMap;

use rayon::prelude::*;

use super::{BitMask, LabelsError};

/// A morphological operation.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MorphOp {
    Erode,
    Dilate,
    /// Erosion then dilation: removes what the ball does not fit in.
    Open,
    /// Dilation then erosion: fills gaps narrower than the ball.
    Close,
}

impl MorphOp {
    /// All four, in the order the command line lists them.
    pub const ALL: [Self; 4] = [Self::Erode, Self::Dilate, Self::Open, Self::Close];

    /// The operation's word, as [`MorphOp::parse`] reads it.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Erode => "erode",
            Self::Dilate => "dilate",
            Self::Open => "open",
            Self::Close => "close",
        }
    }

    pub fn parse(s: &str) -> Result<Self, LabelsError> {
        match Self::ALL.into_iter().find(|op| op.name() == s) {
            Some(op) => Ok(op),
            None => Err(LabelsError::Invalid(format!(
                "operation {s:?}: give erode, dilate, open or close"
            ))),
        }
    }
}

/// The half-widths along `i` of the ball of radius `radius_mm` for voxel size `spacing_mm`:
/// `(dj, dk) → w`, every offset `(di, dj, dk)` with `|di| ≤ w` lying in the ball. A relative
/// tolerance of 1e-9 keeps offsets lying exactly on the sphere.
pub fn ball_offsets(
    radius_mm: f64,
    spacing_mm: [f64; 3],
) -> Result<BTreeMap<(isize, isize), usize>, LabelsError> {
    if !(radius_mm.is_finite() && radius_mm >= 0.0) {
        return Err(LabelsError::Invalid(format!(
            "radius {radius_mm} mm is not a length"
        )));
    }
    let r2 = radius_mm * radius_mm * (1.0 + 1e-9);
    let reach = spacing_mm.map(|s| (radius_mm / s * (1.0 + 1e-9)).floor() as isize);
    if reach.iter().any(|&r| r > 512) {
        return Err(LabelsError::Invalid(format!(
            "radius {radius_mm} mm is more than 512 voxels"
        )));
    }
    let mut out = BTreeMap::new();
    for dk in -reach[2]..=reach[2] {
        for dj in -reach[1]..=reach[1] {
            let rest =
                r2 - (dj as f64 * spacing_mm[1]).powi(2) - (dk as f64 * spacing_mm[2]).powi(2);
            if rest < 0.0 {
                continue;
            }
            let w = (rest.sqrt() / spacing_mm[0]).floor() as usize;
            // the tolerance again: keep di exactly on the sphere
            let w = if ((w + 1) as f64 * spacing_mm[0]).powi(2) <= rest {
                w + 1
            } else {
                w
            };
            out.insert((dj, dk), w);
        }
    }
    Ok(out)
}

/// Applies `op` with a ball of `radius_mm` (see the module docs).
pub fn morph(
    mask: &BitMask,
    op: MorphOp,
    radius_mm: f64,
    spacing_mm: [f64; 3],
) -> Result<BitMask, LabelsError> {
    let ball = ball_offsets(radius_mm, spacing_mm)?;
    Ok(match op {
        MorphOp::Erode => erode(mask, &ball),
        MorphOp::Dilate => dilate(mask, &ball),
        MorphOp::Open => dilate(&erode(mask, &ball), &ball),
        MorphOp::Close => erode(&dilate(mask, &ball), &ball),
    })
}

/// `out[i] = src[i + d]` (bits beyond the row are zero).
fn shift_down(src: &[u64], d: usize, out: &mut [u64]) {
    let (q, r) = (d / 64, d % 64);
    for (w, o) in out.iter_mut().enumerate().take(src.len()) {
        let lo = src.get(w + q).copied().unwrap_or(0);
        let hi = src.get(w + q + 1).copied().unwrap_or(0);
        *o = if r == 0 { lo } else { lo >> r | hi << (64 - r) };
    }
}

/// `out[i] = src[i − d]` (bits before the row are zero).
fn shift_up(src: &[u64], d: usize, out: &mut [u64]) {
    let (q, r) = (d / 64, d % 64);
    for w in 0..src.len() {
        let lo = if w >= q { src[w - q] } else { 0 };
        let below = if w > q { src[w - q - 1] } else { 0 };
        out[w] = if r == 0 {
            lo
        } else {
            lo << r | below >> (64 - r)
        };
    }
}

/// 1-D erosion (`and`) or dilation (`!and`) of a row by half-width `w`, written to `out`;
/// `tmp` and `tmp2` are scratch rows of the same length. The centred window `[i − w, i + w]` is
/// the union of the window `[i, i + w]` reaching right and `[i − w, i]` reaching left, each built
/// by doubling (so bits before the row's start and past its end read as unset, for both).
fn line(src: &[u64], w: usize, and: bool, out: &mut [u64], tmp: &mut [u64], tmp2: &mut [u64]) {
    out.copy_from_slice(src);
    if w == 0 {
        return;
    }
    window(src, w + 1, true, and, out, tmp);
    window(src, w + 1, false, and, tmp2, tmp);
    combine(out, tmp2, and);
}

/// `out[i]` = the AND (`and`) or OR of `src` over `[i, i + n)` (`right`) or `(i − n, i]`.
fn window(src: &[u64], n: usize, right: bool, and: bool, out: &mut [u64], tmp: &mut [u64]) {
    out.copy_from_slice(src);
    let shift = |from: &[u64], d: usize, to: &mut [u64]| {
        if right {
            shift_down(from, d, to);
        } else {
            shift_up(from, d, to);
        }
    };
    let mut len = 1;
    while len * 2 <= n {
        shift(out, len, tmp);
        combine(out, tmp, and);
        len *= 2;
    }
    if len < n {
        shift(out, n - len, tmp);
        combine(out, tmp, and);
    }
}

#[inline]
fn combine(a: &mut [u64], b: &[u64], and: bool) {
    if and {
        a.iter_mut().zip(b).for_each(|(x, y)| *x &= y);
    } else {
        a.iter_mut().zip(b).for_each(|(x, y)| *x |= y);
    }
}

fn erode(mask: &BitMask, ball: &BTreeMap<(isize, isize), usize>) -> BitMask {
    run(mask, ball, true)
}

fn dilate(mask: &BitMask, ball: &BTreeMap<(isize, isize), usize>) -> BitMask {
    run(mask, ball, false)
}

fn run(mask: &BitMask, ball: &BTreeMap<(isize, isize), usize>, and: bool) -> BitMask {
    let dims = mask.dims();
    let [_, ny, nz] = dims;
    let wpr = mask.words_per_row();
    let mut out = BitMask::new(dims);
    let Some(bbox) = mask.bbox() else {
        return out;
    };
    let reach_j = ball
        .keys()
        .map(|(dj, _)| dj.unsigned_abs())
        .max()
        .unwrap_or(0);
    let reach_k = ball
        .keys()
        .map(|(_, dk)| dk.unsigned_abs())
        .max()
        .unwrap_or(0);
    // the rows and planes the result can have bits in
    let (jr, kr) = if and {
        (bbox[1].clone(), bbox[2].clone())
    } else {
        (
            bbox[1].start.saturating_sub(reach_j)..(bbox[1].end + reach_j).min(ny),
            bbox[2].start.saturating_sub(reach_k)..(bbox[2].end + reach_k).min(nz),
        )
    };
    // ball rows grouped by dk: (dj, w)
    let mut by_dk: BTreeMap<isize, Vec<(isize, usize)>> = BTreeMap::new();
    for (&(dj, dk), &w) in ball {
        by_dk.entry(dk).or_default().push((dj, w));
    }
    let plane_words = wpr * ny;
    let last_mask = mask.word_mask(wpr.saturating_sub(1));
    out.words_mut()
        .par_chunks_mut(plane_words)
        .enumerate()
        .filter(|(k, _)| kr.contains(k))
        .for_each(|(k, plane)| {
            let mut acc = vec![if and { u64::MAX } else { 0 }; (jr.end - jr.start) * wpr];
            let mut lined = vec![0u64; ny * wpr];
            let (mut tmp, mut tmp2) = (vec![0u64; wpr], vec![0u64; wpr]);
            for (&dk, rows) in &by_dk {
                let Some(sk) = k.checked_add_signed(dk).filter(|&s| s < nz) else {
                    if and {
                        acc.fill(0); // the ball reaches outside the grid
                    }
                    continue;
                };
                let src_plane = &mask.words()[sk * plane_words..(sk + 1) * plane_words];
                let widths: std::collections::BTreeSet<usize> =
                    rows.iter().map(|&(_, w)| w).collect();
                for w in widths {
                    // the source rows this width is needed for
                    let needed: Vec<usize> = (0..ny)
                        .filter(|&sj| {
                            rows.iter().any(|&(dj, ww)| {
                                ww == w
                                    && sj.checked_add_signed(-dj).is_some_and(|j| jr.contains(&j))
                            })
                        })
                        .collect();
                    for &sj in &needed {
                        let src = &src_plane[sj * wpr..(sj + 1) * wpr];
                        line(
                            src,
                            w,
                            and,
                            &mut lined[sj * wpr..(sj + 1) * wpr],
                            &mut tmp,
                            &mut tmp2,
                        );
                    }
                    for &(dj, ww) in rows {
                        if ww != w {
                            continue;
                        }
                        for j in jr.clone() {
                            let a = &mut acc[(j - jr.start) * wpr..(j - jr.start + 1) * wpr];
                            match j.checked_add_signed(dj).filter(|&s| s < ny) {
                                Some(sj) => combine(a, &lined[sj * wpr..(sj + 1) * wpr], and),
                                None if and => a.fill(0),
                                None => {}
                            }
                        }
                    }
                }
            }
            for j in jr.clone() {
                let a = &acc[(j - jr.start) * wpr..(j - jr.start + 1) * wpr];
                let row = &mut plane[j * wpr..(j + 1) * wpr];
                row.copy_from_slice(a);
                if let Some(last) = row.last_mut() {
                    *last &= last_mask;
                }
            }
        });
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Brute force: every offset of the ball, outside the grid unset.
    fn brute(mask: &BitMask, ball: &BTreeMap<(isize, isize), usize>, and: bool) -> BitMask {
        let d = mask.dims();
        BitMask::from_fn(d, |i, j, k| {
            let mut all = true;
            let mut any = false;
            for (&(dj, dk), &w) in ball {
                for di in -(w as isize)..=(w as isize) {
                    let p = [i as isize + di, j as isize + dj, k as isize + dk];
                    let inside = (0..3).all(|a| p[a] >= 0 && (p[a] as usize) < d[a]);
                    let v = inside && mask.get(p[0] as usize, p[1] as usize, p[2] as usize);
                    all &= v;
                    any |= v;
                }
            }
            if and { all } else { any }
        })
    }

    #[test]
    fn packed_rows_match_brute_force() {
        let dims = [70, 23, 17];
        let mask = BitMask::from_fn(dims, |i, j, k| {
            let h = (i * 7 + j * 13 + k * 29) % 11;
            let blob = ((i as f64 - 30.0) / 20.0).powi(2)
                + ((j as f64 - 11.0) / 8.0).powi(2)
                + ((k as f64 - 8.0) / 6.0).powi(2)
                < 1.0;
            blob && h != 0 || h == 3 && i > 60
        });
        for (r, s) in [
            (0.3, [0.1, 0.12, 0.2]),
            (0.21, [0.1, 0.1, 0.1]),
            (0.0, [1.0; 3]),
        ] {
            let ball = ball_offsets(r, s).unwrap();
            assert_eq!(erode(&mask, &ball), brute(&mask, &ball, true), "erode {r}");
            assert_eq!(
                dilate(&mask, &ball),
                brute(&mask, &ball, false),
                "dilate {r}"
            );
        }
    }

    #[test]
    fn sparse_specks_across_the_whole_grid() {
        let dims = [61, 40, 22];
        let mask = BitMask::from_fn(dims, |i, j, k| {
            (i * 31 + j * 17 + k * 7) % 97 == 0 || (j == 35 && k == 4 && i > 5)
        });
        let ball = ball_offsets(0.1, [0.03, 0.036, 0.05]).unwrap();
        assert_eq!(erode(&mask, &ball), brute(&mask, &ball, true));
        let d = dilate(&mask, &ball);
        let b = brute(&mask, &ball, false);
        assert_eq!(d.count(), b.count());
        assert_eq!(d, b);
    }

    #[test]
    fn ball_is_anisotropic() {
        let b = ball_offsets(0.3, [0.1, 0.1, 0.3]).unwrap();
        assert_eq!(b[&(0, 0)], 3);
        assert_eq!(b[&(0, 1)], 0);
        assert!(!b.contains_key(&(0, 2)));
        assert_eq!(b[&(3, 0)], 0);
    }
}
