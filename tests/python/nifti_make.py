"""Writes NIfTI files with nibabel that nibabel's own test data does not cover, into OUTDIR.

Usage: nifti_make.py NIBABEL_DATA_DIR OUTDIR ; prints a JSON list of the files written with
what each one covers. Voxel values come from a seeded generator (numpy default_rng(7)).
(reference: nibabel 5.x Nifti1Image / Nifti1Pair / Nifti2Image writers)
"""
import json
import os
import shutil
import sys

import nibabel as nib
import numpy as np

src, out = sys.argv[1], sys.argv[2]
os.makedirs(out, exist_ok=True)
rng = np.random.default_rng(7)
made = []


def save(img, name, covers):
    path = os.path.join(out, name)
    nib.save(img, path)
    made.append({"file": path, "covers": covers})


# an oblique, left-handed affine (rotation about an oblique axis, then a flip), mm
th = 0.4
ax = np.array([1.0, 2.0, 2.0]) / 3.0
K = np.array([[0, -ax[2], ax[1]], [ax[2], 0, -ax[0]], [-ax[1], ax[0], 0]])
R = np.eye(3) + np.sin(th) * K + (1 - np.cos(th)) * K @ K
oblique = np.eye(4)
oblique[:3, :3] = R @ np.diag([0.5, 0.75, -1.25])
oblique[:3, 3] = [10.0, -20.0, 5.5]

shape = (7, 6, 5)

# .hdr/.img pairs: nibabel's own header files with voxel data of the size they declare
for hdr_name, cls in (("nifti1.hdr", nib.Nifti1Pair), ("nifti2.hdr", nib.Nifti2Pair)):
    hdr = nib.load(os.path.join(src, hdr_name)).header
    data = rng.integers(-3000, 3000, size=hdr.get_data_shape()).astype(np.int16)
    img = cls(data, None, hdr)
    save(img, "pair_" + hdr_name, f"{hdr_name} header with an .img (pair, {cls.__name__})")

# a gzipped pair
img = nib.Nifti1Pair(rng.integers(0, 255, size=shape).astype(np.uint8), oblique)
save(img, "gzpair.hdr.gz", ".hdr.gz/.img.gz pair")

# converted types
for n, (dt, lo, hi, label) in enumerate((
    (np.int8, -100, 100, "int8 -> i16"),
    (np.int8, 0, 100, "int8 -> u8"),
    (np.int32, -30000, 30000, "int32 -> i16"),
    (np.int32, 0, 60000, "int32 -> u16"),
    (np.int32, -(2**30), 2**30, "int32 -> f32 (rounded)"),
    (np.uint32, 0, 250, "uint32 -> u8"),
    (np.int64, -5, 5, "int64 -> i16"),
    (np.uint64, 0, 2**20, "uint64 -> f32 (exact)"),
)):
    data = rng.integers(lo, hi, size=shape).astype(dt)
    img = nib.Nifti1Image(data, oblique, dtype=dt)
    save(img, f"conv{n}_{np.dtype(dt).name}.nii", label)

data = rng.normal(size=shape)
data[1, 2, 3] = np.nan
img = nib.Nifti1Image(data, oblique)
img.header.set_data_dtype(np.float64)
save(img, "conv_float64.nii.gz", "float64 -> f32 (rounded), NaN")
img = nib.Nifti1Image(rng.integers(-50, 50, size=shape).astype(np.float64), oblique)
img.header.set_data_dtype(np.float64)
save(img, "conv_float64_int.nii", "float64 holding integers -> i16")

# big-endian NIfTI-2, scaled uint16
hdr = nib.Nifti2Header(endianness=">")
img = nib.Nifti2Image(rng.integers(0, 60000, size=shape).astype(np.uint16), oblique, hdr, dtype=np.uint16)
save(img, "be_nifti2_scaled.nii", "big-endian NIfTI-2, uint16, scl_slope/inter")
# nibabel chooses its own scaling on save, so scl_slope/scl_inter are patched in afterwards
# (reference: nifti2.h, scl_slope at byte 176, scl_inter at 184, float64)
with open(os.path.join(out, "be_nifti2_scaled.nii"), "r+b") as f:
    f.seek(176)
    f.write(np.array([0.25, -100.0], dtype=">f8").tobytes())

# qform only (sform_code 0), oblique and left-handed: our qform vs nibabel's
img = nib.Nifti1Image(rng.normal(size=shape).astype(np.float32), None)
img.set_qform(oblique, code=1)
img.set_sform(None, code=0)
save(img, "qform_only.nii", "qform only (oblique, qfac -1)")

# no transform at all: both codes 0 (nibabel's base affine differs from method 1, see test);
# nibabel sets codes on save, so they are patched to 0 afterwards (reference: nifti1.h,
# qform_code int16 at byte 252, sform_code at 254)
img = nib.Nifti1Image(rng.integers(0, 9, size=shape).astype(np.int16), np.diag([0.5, 0.25, 2.0, 1.0]))
save(img, "no_xform.nii", "sform_code = qform_code = 0 (method 1)")
with open(os.path.join(out, "no_xform.nii"), "r+b") as f:
    f.seek(252)
    f.write(np.array([0, 0], dtype="<i2").tobytes())

# units: micrometres and metres (nibabel ignores xyzt_units; we scale to mm)
for unit in ("micron", "meter"):
    img = nib.Nifti1Image(rng.integers(0, 9, size=shape).astype(np.uint8), oblique)
    img.header.set_xyzt_units(xyz=unit)
    save(img, f"units_{unit}.nii", f"xyzt_units {unit}")

# 4D with dim[4] = 1
img = nib.Nifti1Image(rng.integers(0, 9, size=shape + (1,)).astype(np.int16), oblique)
save(img, "4d_one.nii", "4D with dim[4] = 1")

# refused: RGB and complex
rgb = np.zeros(shape, dtype=[("R", "u1"), ("G", "u1"), ("B", "u1")])
save(nib.Nifti1Image(rgb, np.eye(4)), "rgb.nii", "RGB (refused)")
save(nib.Nifti1Image(np.zeros(shape, np.complex64), np.eye(4)), "complex.nii", "complex64 (refused)")

# gzip records the time of writing in its header (bytes 4-7, MTIME); zero it so that the files,
# and so the tests' record of them, are the same bytes on every machine (RFC 1952: 0 means no
# time stamp is available)
for name in sorted(os.listdir(out)):
    if name.endswith(".gz"):
        with open(os.path.join(out, name), "r+b") as f:
            f.seek(4)
            f.write(b"\0\0\0\0")

print(json.dumps(made))
