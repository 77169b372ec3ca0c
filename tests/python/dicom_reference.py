"""pydicom + numpy's reading of DICOM series, for the checks of Sutura's DICOM reader.

Usage: dicom_reference.py TRUTH_DIR SERIES_DIR [uid=UID] SERIES_DIR ...
Prints a JSON list, one object per series: dims (i, j, k), the stored dtype, the SHA-256 of
the voxels as Sutura keeps them (k, j, i order, little-endian; int8 widened to int16), the
sum of the rescaled values, rescale slope and intercept, world_from_voxel in RAS (4x4 rows)
and the world positions of the eight corner voxels.

How pydicom + numpy read a series (reference: pydicom 3.x dcmread / Dataset.pixel_array;
DICOM PS3.3 C.7.6.2.1.1 for the placement):
- every file of the folder is read with dcmread; files without PixelData are left out; with
  `=UID` only that SeriesInstanceUID is kept;
- slices are sorted by ImagePositionPatient projected on the normal, the cross product of
  ImageOrientationPatient's row and column directions;
- voxel values are pixel_array (pydicom decodes native and RLE data itself);
- placement (LPS): column i = row direction x PixelSpacing[1], column j = column direction x
  PixelSpacing[0], column k = (last position - first position) / (slices - 1) (for one slice:
  the normal x 1 mm, Sutura's stated convention), origin = the first position;
- RAS = diag(-1, -1, 1) LPS, the convention nibabel and DICOM-to-NIfTI converters use.
When TRUTH_DIR holds NAME.npy / NAME.json for a series folder NAME (the arrays dicom_make.py
wrote the series from), pydicom's reading is first checked against them.
"""
import hashlib
import json
import os
import sys

import numpy as np
import pydicom


def read_series(folder, uid):
    slices = []
    for name in sorted(os.listdir(folder)):
        path = os.path.join(folder, name)
        if name.startswith(".") or not os.path.isfile(path):
            continue
        try:
            ds = pydicom.dcmread(path)
        except pydicom.errors.InvalidDicomError:
            continue
        if "PixelData" not in ds:
            continue
        if uid is not None and ds.SeriesInstanceUID != uid:
            continue
        slices.append(ds)
    first = slices[0]
    o = np.array([float(v) for v in first.ImageOrientationPatient])
    row, col = o[:3], o[3:]
    normal = np.cross(row, col)
    slices.sort(key=lambda d: float(np.dot(normal, [float(v) for v in d.ImagePositionPatient])))
    arr = np.stack([d.pixel_array for d in slices])
    pos = [np.array([float(v) for v in d.ImagePositionPatient]) for d in slices]
    ps = [float(v) for v in first.PixelSpacing]
    lps = np.eye(4)
    lps[:3, 0] = row * ps[1]
    lps[:3, 1] = col * ps[0]
    lps[:3, 2] = (pos[-1] - pos[0]) / (len(pos) - 1) if len(pos) > 1 else normal
    lps[:3, 3] = pos[0]
    slope = float(first.get("RescaleSlope", 1.0))
    intercept = float(first.get("RescaleIntercept", 0.0))
    return arr, lps, slope, intercept, first.SeriesInstanceUID


def main():
    truth_dir = sys.argv[1]
    items = []
    for arg in sys.argv[2:]:
        if arg.startswith("uid="):
            items[-1] = (items[-1][0], arg[4:])
        else:
            items.append((arg, ""))
    out = []
    for folder, uid in items:
        arg = folder + (f"={uid}" if uid else "")
        arr, lps, slope, intercept, series_uid = read_series(folder, uid or None)
        name = os.path.basename(folder.rstrip("/"))
        for key in ([name] if not uid else []) + [f"{name}_{c}" for c in "ab"]:
            npy = os.path.join(truth_dir, key + ".npy")
            if not os.path.exists(npy):
                continue
            with open(os.path.join(truth_dir, key + ".json")) as f:
                t = json.load(f)
            if t["series_uid"] != series_uid:
                continue
            want = np.load(npy)
            assert arr.dtype == want.dtype and np.array_equal(arr, want), f"{key}: pydicom differs from the array written"
            assert np.allclose(lps, np.array(t["lps"]), atol=1e-6), f"{key}: placement differs from the one written"
        stored = arr.astype(np.int16) if arr.dtype == np.int8 else arr
        stored = np.ascontiguousarray(stored.astype(stored.dtype.newbyteorder("<")))
        ras = np.diag([-1.0, -1.0, 1.0, 1.0]) @ lps
        nk, nj, ni = arr.shape
        corners = []
        for k in (0, nk - 1):
            for j in (0, nj - 1):
                for i in (0, ni - 1):
                    corners.append({"ijk": [i, j, k], "world": (ras @ [i, j, k, 1.0])[:3].tolist()})
        out.append({
            "series": os.path.basename(folder.rstrip("/")) + (f"={uid}" if uid else ""),
            "series_uid": series_uid,
            "dims": [ni, nj, nk],
            "dtype": str(arr.dtype),
            "sha256": hashlib.sha256(stored.tobytes()).hexdigest(),
            "rescaled_sum": float((arr.astype(np.float64) * slope + intercept).sum()),
            "slope": slope,
            "intercept": intercept,
            "world_from_voxel": ras.tolist(),
            "corners": corners,
        })
    print(json.dumps(out))


main()
