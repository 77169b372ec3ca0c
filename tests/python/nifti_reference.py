"""Reference reading of NIfTI files by nibabel (reference: nibabel 5.x, nifti1.py / nifti2.py).

Usage: nifti_reference.py FILE... ; prints a JSON list, one entry per file:
  ok, shape, on-disk dtype, affine (img.affine: sform if sform_code>0, else qform if
  qform_code>0, else the base affine), qform (header.get_qform()), codes, and for the first 3D
  volume the NaN-aware sum of the scaled values (dataobj applies scl_slope/scl_inter), the NaN
  count, and values at a few voxels. A file nibabel cannot read gets ok=false and the error.
"""
import json
import sys

import nibabel as nib
import numpy as np


def sample_points(shape):
    nx, ny, nz = shape
    return [
        [0, 0, 0],
        [nx - 1, ny - 1, nz - 1],
        [nx // 2, ny // 2, nz // 2],
        [nx // 3, (2 * ny) // 3, nz // 4],
        [nx - 1, 0, nz // 2],
    ]


def describe(path):
    out = {"file": path}
    try:
        img = nib.load(path)
        if not hasattr(img, "dataobj") or not hasattr(img.header, "get_data_dtype"):
            raise TypeError(f"{type(img).__name__} is not a voxel image")
        data = np.asanyarray(img.dataobj)
    except Exception as e:  # noqa: BLE001 - any failure is reported to the Rust side
        out.update(ok=False, error=f"{type(e).__name__}: {e}")
        return out
    hdr = img.header
    shape = list(data.shape)
    if data.dtype.kind not in "uif":
        # RGB / complex: nibabel reads it, Sutura refuses it; report only what it is
        out.update(ok=True, supported=False, shape=shape, dtype=str(data.dtype))
        return out
    out["supported"] = True
    vol = data
    while vol.ndim > 3:
        vol = vol[..., 0]
    while vol.ndim < 3:
        vol = vol[..., np.newaxis]
    vol = vol.astype(np.float64)
    pts = sample_points(vol.shape)
    out.update(
        ok=True,
        kind=type(img).__name__,
        shape=shape,
        dtype=str(hdr.get_data_dtype().newbyteorder("=")),
        big_endian=hdr.endianness == ">",
        affine=np.asarray(img.affine, dtype=float).tolist(),
        qform=np.asarray(hdr.get_qform(), dtype=float).tolist(),
        sform_code=int(hdr["sform_code"]),
        qform_code=int(hdr["qform_code"]),
        xyzt_units=int(hdr["xyzt_units"]),
        nansum=float(np.nansum(vol)),
        nan_count=int(np.isnan(vol).sum()),
        abs_sum=float(np.nansum(np.abs(vol))),
        samples=[[p, None if np.isnan(vol[tuple(p)]) else float(vol[tuple(p)])] for p in pts],
    )
    return out


print(json.dumps([describe(p) for p in sys.argv[1:]]))
