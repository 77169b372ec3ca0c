//! Labels in pictures: a label image blended over a slice picture, each label in its palette
//! colour ([`blend_labels`]), and a scan with everything outside chosen labels lowered to its
//! minimum ([`keep_labels`]), so that a 3D view shows only those labels' material and a pick in
//! 3D lands on it.

use rayon::prelude::*;

use super::RgbaImage;
use super::slice::SliceGeometry;
use crate::geometry::Affine3;
use crate::labels::{LabelVolume, palette_colour};
use crate::volume::{Volume, VolumeError};

/// How labels are drawn over a slice.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LabelStyle {
    /// How much of the label colour is mixed in (0 to 1).
    pub opacity: f64,
    /// Only the labels' edges, in full colour: pixels whose label differs from a pixel beside
    /// them (left, right, above, below); the slice shows through inside.
    pub outline: bool,
}

/// Blends the labels under each pixel of a slice picture (`geometry` on a scan placed by
/// `world_from_voxel`, the grid of `labels`) over `rgba` in `style`: the nearest voxel's label
/// in its palette colour; unlabelled voxels and pixels outside the grid are left as they are.
/// Labels for which `shown` is false are left out.
pub fn blend_labels(
    rgba: &mut RgbaImage,
    geometry: &SliceGeometry,
    world_from_voxel: &Affine3,
    labels: &LabelVolume,
    style: LabelStyle,
    shown: &(dyn Fn(u8) -> bool + Sync),
) {
    let voxel_from_world = world_from_voxel.inverse();
    let dims = labels.dims();
    let (width, height) = (rgba.width, rgba.height);
    if width == 0 || height == 0 {
        return;
    }
    // the label under each pixel (0: none drawn)
    let mut under = vec![0u8; width * height];
    under
        .par_chunks_mut(width)
        .enumerate()
        .for_each(|(row, line)| {
            for (col, out) in line.iter_mut().enumerate() {
                let w = geometry.pixel_world(col as f64, row as f64);
                let v = voxel_from_world.world_to_voxel(w).0;
                let idx = [v.x.round(), v.y.round(), v.z.round()];
                if idx
                    .iter()
                    .zip(dims)
                    .any(|(x, n)| !(*x >= 0.0 && *x < n as f64))
                {
                    continue;
                }
                let value = labels.get(idx[0] as usize, idx[1] as usize, idx[2] as usize);
                if value != 0 && shown(value) {
                    *out = value;
                }
            }
        });
    let colours: Vec<[u8; 4]> = (0..=255u8).map(palette_colour).collect();
    let a = if style.outline {
        1.0
    } else {
        style.opacity.clamp(0.0, 1.0)
    };
    let under = &under;
    rgba.pixels
        .par_chunks_mut(width * 4)
        .enumerate()
        .for_each(|(row, line)| {
            for (col, px) in line.chunks_exact_mut(4).enumerate() {
                let value = under[row * width + col];
                if value == 0 {
                    continue;
                }
                if style.outline {
                    let differs = |r: usize, c: usize| under[r * width + c] != value;
                    let edge = (col > 0 && differs(row, col - 1))
                        || (col + 1 < width && differs(row, col + 1))
                        || (row > 0 && differs(row - 1, col))
                        || (row + 1 < height && differs(row + 1, col));
                    if !edge {
                        continue;
                    }
                }
                let c = colours[usize::from(value)];
                for ch in 0..3 {
                    let mixed = f64::from(px[ch]) * (1.0 - a) + f64::from(c[ch]) * a;
                    px[ch] = mixed.round() as u8;
                }
            }
        });
}

/// A copy of `volume` in which every voxel outside the labels for which `keep` is true holds
/// the scan's smallest stored value, so that surfaces and projections show only the kept
/// labels' material. With `iso` (rescaled units), the voxels just outside the labels (sharing
/// a face with a kept voxel) keep their value when it lies below `iso`: a surface at `iso`
/// then meets the background where it did in the scan, smooth, instead of following the
/// labels' voxel steps; where a kept label touches other material, that material's first voxel
/// is lowered too and the surface closes between the two. `labels` must be on the volume's
/// grid.
pub fn keep_labels(
    volume: &Volume,
    labels: &LabelVolume,
    keep: &(dyn Fn(u8) -> bool + Sync),
    iso: Option<f64>,
) -> Result<Volume, VolumeError> {
    let mask = labels.mask_where(keep);
    let [nx, ny, nz] = volume.dims();
    let rescale = volume.rescale();
    let beside = |i: usize, j: usize, k: usize| {
        (i > 0 && mask.get(i - 1, j, k))
            || (i + 1 < nx && mask.get(i + 1, j, k))
            || (j > 0 && mask.get(i, j - 1, k))
            || (j + 1 < ny && mask.get(i, j + 1, k))
            || (k > 0 && mask.get(i, j, k - 1))
            || (k + 1 < nz && mask.get(i, j, k + 1))
    };
    let mut out = crate::with_voxels!(volume.voxels(), |s| {
        let low = s
            .iter()
            .copied()
            .fold(s[0], |m, x| if x < m { x } else { m });
        let mut data = s.to_vec();
        data.par_chunks_mut(nx).enumerate().for_each(|(r, line)| {
            let (j, k) = (r % ny, r / ny);
            for (i, x) in line.iter_mut().enumerate() {
                if mask.get(i, j, k) {
                    continue;
                }
                let below_iso = iso.is_some_and(|level| {
                    use crate::volume::Voxel;
                    let v = x.to_f64();
                    rescale.map_or(v, |r| r.apply(v)) < level
                });
                if !(below_iso && beside(i, j, k)) {
                    *x = low;
                }
            }
        });
        Volume::from_vec(volume.dims(), *volume.world_from_voxel(), data)
    })?;
    out.set_rescale(volume.rescale());
    out.notes.clone_from(&volume.notes);
    out.spacing_origin = volume.spacing_origin;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::AxisPlane;

    fn scan() -> (Volume, LabelVolume) {
        let dims = [8, 6, 4];
        let w = Affine3::from_rows([
            [0.5, 0.0, 0.0, 1.0],
            [0.0, 0.5, 0.0, 0.0],
            [0.0, 0.0, 1.0, 0.0],
            [0.0, 0.0, 0.0, 1.0],
        ])
        .unwrap();
        let v = Volume::from_vec(dims, w, (0..8 * 6 * 4).map(|x| x as u16 + 10).collect()).unwrap();
        let mut l = LabelVolume::new(dims, [0.5, 0.5, 1.0]);
        let a = l.add_label("skull").unwrap();
        let b = l.add_label("rock").unwrap();
        let mut sel = crate::labels::mask::BitMask::new(dims);
        sel.set(2, 3, 1, true);
        l.apply(&sel, a, crate::labels::Combine::Add, false)
            .unwrap();
        let mut sel = crate::labels::mask::BitMask::new(dims);
        sel.set(5, 1, 1, true);
        l.apply(&sel, b, crate::labels::Combine::Add, false)
            .unwrap();
        (v, l)
    }

    #[test]
    fn a_slice_shows_each_label_in_its_colour_where_it_lies() {
        let (v, l) = scan();
        let g = SliceGeometry::axis(&v, AxisPlane { axis: 2, index: 1 }, None).unwrap();
        let mut img = RgbaImage {
            width: g.width,
            height: g.height,
            pixels: vec![0; g.width * g.height * 4],
        };
        blend_labels(
            &mut img,
            &g,
            v.world_from_voxel(),
            &l,
            LabelStyle {
                opacity: 1.0,
                outline: false,
            },
            &|_| true,
        );
        // one pixel per voxel on this plane: pixel (i, j) is voxel (i, j, 1)
        let px = |i: usize, j: usize| &img.pixels[(j * g.width + i) * 4..][..3];
        assert_eq!(px(2, 3), &palette_colour(1)[..3]);
        assert_eq!(px(5, 1), &palette_colour(2)[..3]);
        assert_eq!(px(0, 0), &[0, 0, 0]);
        // a label left out is not drawn; half opacity mixes
        let mut img2 = RgbaImage {
            width: g.width,
            height: g.height,
            pixels: vec![100; g.width * g.height * 4],
        };
        blend_labels(
            &mut img2,
            &g,
            v.world_from_voxel(),
            &l,
            LabelStyle {
                opacity: 0.5,
                outline: false,
            },
            &|x| x == 1,
        );
        let px2 = |i: usize, j: usize| &img2.pixels[(j * g.width + i) * 4..][..3];
        assert_eq!(px2(5, 1), &[100, 100, 100]);
        let c = palette_colour(1);
        for (ch, &value) in c.iter().take(3).enumerate() {
            let want = (100.0 * 0.5 + f64::from(value) * 0.5).round() as u8;
            assert_eq!(px2(2, 3)[ch], want);
        }
    }

    #[test]
    fn an_outline_draws_only_the_edge_of_a_label() {
        let (v, mut l) = scan();
        // a 3 × 3 block of label 1 on plane k = 2, voxels (3..6, 1..4)
        let mut sel = crate::labels::mask::BitMask::new(v.dims());
        for i in 3..6 {
            for j in 1..4 {
                sel.set(i, j, 2, true);
            }
        }
        l.apply(&sel, 1, crate::labels::Combine::Add, false)
            .unwrap();
        let g = SliceGeometry::axis(&v, AxisPlane { axis: 2, index: 2 }, None).unwrap();
        let mut img = RgbaImage {
            width: g.width,
            height: g.height,
            pixels: vec![50; g.width * g.height * 4],
        };
        let style = LabelStyle {
            opacity: 0.3,
            outline: true,
        };
        blend_labels(&mut img, &g, v.world_from_voxel(), &l, style, &|_| true);
        let px = |i: usize, j: usize| &img.pixels[(j * g.width + i) * 4..][..3];
        // the eight edge voxels in full colour, the centre and the outside untouched
        for (i, j) in [
            (3, 1),
            (4, 1),
            (5, 1),
            (3, 2),
            (5, 2),
            (3, 3),
            (4, 3),
            (5, 3),
        ] {
            assert_eq!(px(i, j), &palette_colour(1)[..3], "({i}, {j})");
        }
        assert_eq!(px(4, 2), &[50, 50, 50]);
        assert_eq!(px(1, 4), &[50, 50, 50]);
    }

    #[test]
    fn keeping_a_label_lowers_everything_else_to_the_minimum() {
        let (v, l) = scan();
        let kept = keep_labels(&v, &l, &|x| x == 1, None).unwrap();
        assert_eq!(kept.dims(), v.dims());
        assert_eq!(kept.world_from_voxel().rows(), v.world_from_voxel().rows());
        let at = |vol: &Volume, i, j, k| vol.value(crate::geometry::VoxelIndex::new(i, j, k));
        assert_eq!(at(&kept, 2, 3, 1), at(&v, 2, 3, 1));
        assert_eq!(at(&kept, 5, 1, 1), Some(10.0));
        assert_eq!(at(&kept, 7, 5, 3), Some(10.0));
        // with an iso-value: the kept voxel's face neighbours below it keep their values, those
        // at or above it and every voxel further away are lowered (voxel (i, j, k) holds
        // 10 + i + 8j + 48k)
        let kept = keep_labels(&v, &l, &|x| x == 1, Some(100.0)).unwrap();
        assert_eq!(at(&kept, 2, 3, 1), at(&v, 2, 3, 1));
        assert_eq!(
            at(&kept, 1, 3, 1),
            Some(83.0),
            "beside, below the iso-value"
        );
        assert_eq!(
            at(&kept, 2, 3, 2),
            Some(10.0),
            "beside, above it: 132 lowered"
        );
        assert_eq!(at(&kept, 0, 3, 1), Some(10.0), "not beside");
        assert_eq!(
            at(&kept, 1, 2, 1),
            Some(10.0),
            "only faces count, not edges"
        );
    }
}
