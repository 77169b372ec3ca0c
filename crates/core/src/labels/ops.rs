//! The preparation steps as one call each on a label volume, shared by `sutura labels` and the
//! workstation: each finds its selection with the tools of this module's siblings and applies
//! it to one label, returning the [`Edit`] that undoes it. The rules both front ends follow
//! live here: a region grows only through unlabelled voxels and the label's own unless told
//! otherwise; keeping a piece and removing small pieces intersect the label with what is kept;
//! a morphological operation replaces the label with its result.

use std::ops::Range;

use super::interp::interpolate;
use super::morph::{MorphOp, morph};
use super::region::{
    Connectivity, GrowOptions, IntensityRange, fill_holes, grow, keep_piece_at, remove_small,
    threshold_source,
};
use super::{Combine, Edit, LabelVolume, LabelsError};

/// Selects the voxels whose value lies in `range`, within label `within` (anywhere when
/// `None`) and the voxel box `bounds` (the whole grid when `None`), and applies them to label
/// `value` in `mode`. The scan is read through the volume interface (a store 16 planes at a
/// time).
#[allow(clippy::too_many_arguments)] // reason: the command line's options, one by one
pub fn threshold_label(
    labels: &mut LabelVolume,
    source: &dyn crate::volume::VolumeSource,
    value: u8,
    range: IntensityRange,
    within: Option<u8>,
    bounds: Option<&[Range<usize>; 3]>,
    mode: Combine,
    overwrite: bool,
) -> Result<Edit, LabelsError> {
    if source.dims() != labels.dims() {
        return Err(LabelsError::GridMismatch(labels.dims(), source.dims()));
    }
    let within = within.map(|w| labels.mask_of(w));
    let sel = threshold_source(source, range, within.as_ref(), bounds)?;
    labels.apply(&sel, value, mode, overwrite)
}

/// Adds, subtracts or intersects label `other` of the same label image with label `value`.
/// Adding moves `other`'s voxels to `value` (each voxel holds one label, so adding without
/// taking them would change nothing).
pub fn combine_labels(
    labels: &mut LabelVolume,
    value: u8,
    other: u8,
    mode: Combine,
) -> Result<Edit, LabelsError> {
    if other == value {
        return Err(LabelsError::Invalid(
            "a label combined with itself changes nothing: choose another label".into(),
        ));
    }
    let m = labels.mask_of(other);
    labels.apply(&m, value, mode, mode == Combine::Add)
}

/// Grows a region from `seed` (see [`grow`]) and applies it to label `value` in `mode`;
/// unless `through_labels`, the region does not enter voxels of other labels.
#[allow(clippy::too_many_arguments)] // reason: the command line's options, one by one
pub fn grow_label(
    labels: &mut LabelVolume,
    volume: &dyn crate::volume::VolumeSource,
    value: u8,
    seed: [usize; 3],
    options: &GrowOptions,
    through_labels: bool,
    mode: Combine,
    overwrite: bool,
) -> Result<Edit, LabelsError> {
    let within = (!through_labels).then(|| labels.mask_where(|v| v == 0 || v == value));
    let sel = grow(volume, seed, options, within.as_ref())?;
    labels.apply(&sel, value, mode, overwrite)
}

/// Label `value` keeps only its connected piece holding `at`.
pub fn keep_piece(
    labels: &mut LabelVolume,
    value: u8,
    at: [usize; 3],
    connectivity: Connectivity,
) -> Result<Edit, LabelsError> {
    let piece = keep_piece_at(&labels.mask_of(value), at, connectivity)?;
    labels.apply(&piece, value, Combine::Intersect, false)
}

/// Label `value` loses its pieces of fewer than `min_voxels` voxels.
pub fn remove_small_pieces(
    labels: &mut LabelVolume,
    value: u8,
    min_voxels: u64,
    connectivity: Connectivity,
) -> Result<Edit, LabelsError> {
    let kept = remove_small(&labels.mask_of(value), min_voxels, connectivity);
    labels.apply(&kept, value, Combine::Intersect, false)
}

/// Fills label `value`'s slices between its drawn slices along `axis` (see [`interpolate`]);
/// also returns the drawn slices' indices.
pub fn interpolate_label(
    labels: &mut LabelVolume,
    value: u8,
    axis: usize,
) -> Result<(Edit, Vec<usize>), LabelsError> {
    let (sel, drawn) = interpolate(labels, value, axis)?;
    Ok((labels.apply(&sel, value, Combine::Add, false)?, drawn))
}

/// Replaces label `value` with its erosion, dilation, opening or closing by a ball of
/// `radius_mm` in the world.
pub fn morph_label(
    labels: &mut LabelVolume,
    value: u8,
    op: MorphOp,
    radius_mm: f64,
) -> Result<Edit, LabelsError> {
    let m = morph(&labels.mask_of(value), op, radius_mm, labels.spacing_mm)?;
    // the result replaces the label: remove what it lost, add what it gained
    let lost = labels.apply(&m, value, Combine::Intersect, false)?;
    Ok(lost.then(labels.apply(&m, value, Combine::Add, false)?))
}

/// Fills label `value`'s enclosed cavities.
pub fn fill_label_holes(labels: &mut LabelVolume, value: u8) -> Result<Edit, LabelsError> {
    let filled = fill_holes(&labels.mask_of(value));
    labels.apply(&filled, value, Combine::Add, false)
}
