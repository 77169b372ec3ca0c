"""Writes DICOM series with pydicom from known numpy arrays into OUTDIR, one folder per series,
and the arrays and placements they were written from into OUTDIR/truth/NAME.npy / NAME.json.

Usage: dicom_make.py OUTDIR
Values come from a seeded generator (numpy default_rng(11)); UIDs are fixed strings, so the
files are byte-for-byte the same on every run of the same pydicom.
(reference: pydicom 3.x Dataset / FileMetaDataset writer, RLE Lossless encoder)

Series:
- oblique_i16: int16, an oblique orientation, rescale slope 0.5 / intercept -1024, files
  named in an order unrelated to the positions (some without extension), InstanceNumber
  counting down along the normal;
- axial_u8: uint8, the slices stored top down (positions decreasing with the file names);
- signed_s8: 8-bit signed samples;
- bits12_i16: signed samples of 12 bits stored in 16, negative values stored as 12-bit two's
  complement with the upper 4 bits clear;
- rle_u16: uint16, RLE Lossless;
- implicit_u16: uint16, implicit VR little endian;
- two_series: two series in one folder (uint16, different sizes).
"""
import json
import os
import sys

import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import (
    CTImageStorage,
    ExplicitVRLittleEndian,
    ImplicitVRLittleEndian,
    RLELossless,
)

out = sys.argv[1]
os.makedirs(os.path.join(out, "truth"), exist_ok=True)
rng = np.random.default_rng(11)
ROOT = "1.2.826.0.1.3680043.10.1138"


def rotation(axis, angle):
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    k = np.array([[0, -a[2], a[1]], [a[2], 0, -a[0]], [-a[1], a[0], 0]])
    return np.eye(3) + np.sin(angle) * k + (1 - np.cos(angle)) * k @ k


def ds_text(x):
    # DICOM decimal strings hold at most 16 characters
    s = f"{x:.10g}"
    return s[:16]


def write_series(
    folder,
    name,
    arr,
    *,
    row_dir,
    col_dir,
    spacing_rc,
    step,
    origin,
    series_number,
    description,
    slope=None,
    intercept=None,
    bits_stored=None,
    syntax=ExplicitVRLittleEndian,
    names=None,
    stored=None,
):
    """arr: (k, rows, columns). `stored`: the samples as written, if they differ from arr."""
    nk, nr, nc = arr.shape
    row_dir, col_dir = np.asarray(row_dir, float), np.asarray(col_dir, float)
    normal = np.cross(row_dir, col_dir)
    series_uid = f"{ROOT}.{series_number}"
    os.makedirs(folder, exist_ok=True)
    positions = []
    for k in range(nk):
        pos = np.asarray(origin, float) + k * step * normal
        positions.append(pos)
        ds = Dataset()
        ds.file_meta = FileMetaDataset()
        ds.file_meta.TransferSyntaxUID = syntax
        ds.file_meta.MediaStorageSOPClassUID = CTImageStorage
        sop = f"{series_uid}.{k + 1}"
        ds.file_meta.MediaStorageSOPInstanceUID = sop
        ds.SOPClassUID = CTImageStorage
        ds.SOPInstanceUID = sop
        ds.Modality = "CT"
        ds.SeriesInstanceUID = series_uid
        ds.StudyInstanceUID = f"{ROOT}.99"
        ds.SeriesNumber = series_number
        ds.SeriesDescription = description
        ds.InstanceNumber = nk - k
        ds.ImagePositionPatient = [ds_text(v) for v in pos]
        ds.ImageOrientationPatient = [ds_text(v) for v in np.concatenate([row_dir, col_dir])]
        ds.PixelSpacing = [ds_text(spacing_rc[0]), ds_text(spacing_rc[1])]
        ds.SliceThickness = "99"  # deliberately wrong: spacing must come from the positions
        ds.Rows, ds.Columns = nr, nc
        ds.SamplesPerPixel = 1
        ds.PhotometricInterpretation = "MONOCHROME2"
        ds.BitsAllocated = arr.dtype.itemsize * 8
        ds.BitsStored = bits_stored or ds.BitsAllocated
        ds.HighBit = ds.BitsStored - 1
        ds.PixelRepresentation = 1 if arr.dtype.kind == "i" else 0
        if slope is not None:
            ds.RescaleSlope = ds_text(slope)
            ds.RescaleIntercept = ds_text(intercept)
        src = (stored if stored is not None else arr)[k]
        ds.PixelData = np.ascontiguousarray(src).tobytes()
        if syntax == RLELossless:
            ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
            ds.compress(RLELossless, np.ascontiguousarray(src), encoding_plugin="pydicom", generate_instance_uid=False)
        fname = names[k] if names else f"slice_{k:03d}.dcm"
        ds.save_as(os.path.join(folder, fname), enforce_file_format=True, implicit_vr=syntax == ImplicitVRLittleEndian, little_endian=True)
    # the placement the files describe (LPS), as DICOM PS3.3 C.7.6.2.1.1 defines it
    lps = np.eye(4)
    lps[:3, 0] = row_dir * spacing_rc[1]
    lps[:3, 1] = col_dir * spacing_rc[0]
    lps[:3, 2] = normal * step
    lps[:3, 3] = origin
    np.save(os.path.join(out, "truth", name + ".npy"), arr)
    with open(os.path.join(out, "truth", name + ".json"), "w") as f:
        json.dump({"series_uid": series_uid, "lps": lps.tolist(), "slope": slope, "intercept": intercept}, f)


# oblique, shuffled names, reverse instance numbers
R = rotation([0.3, -0.5, 0.8], 0.7)
arr = rng.integers(-2000, 3000, size=(12, 10, 14)).astype(np.int16)
perm = rng.permutation(12)
names = [f"{p:02x}{'.dcm' if p % 3 == 0 else ''}" for p in perm]
write_series(os.path.join(out, "oblique_i16"), "oblique_i16", arr, row_dir=R[:, 0], col_dir=R[:, 1],
             spacing_rc=(0.6, 0.4), step=0.8, origin=(12.5, -30.25, 48.0), series_number=1,
             description="oblique int16", slope=0.5, intercept=-1024, names=names)

# uint8, stored top down: names increase as positions decrease
arr = rng.integers(0, 256, size=(5, 7, 9)).astype(np.uint8)
write_series(os.path.join(out, "axial_u8"), "axial_u8", arr, row_dir=(1, 0, 0), col_dir=(0, 1, 0),
             spacing_rc=(0.25, 0.25), step=0.5, origin=(-1.0, 2.0, -3.0), series_number=2,
             description="axial uint8", names=[f"IM{4 - k}" for k in range(5)])

arr = rng.integers(-128, 128, size=(4, 5, 6)).astype(np.int8)
write_series(os.path.join(out, "signed_s8"), "signed_s8", arr, row_dir=(0, 1, 0), col_dir=(0, 0, -1),
             spacing_rc=(1.0, 1.5), step=2.0, origin=(0.0, 0.0, 0.0), series_number=3,
             description="sagittal int8", slope=2, intercept=-100)

arr = rng.integers(-2048, 2048, size=(3, 6, 5)).astype(np.int16)
write_series(os.path.join(out, "bits12_i16"), "bits12_i16", arr, row_dir=(1, 0, 0), col_dir=(0, 0, -1),
             spacing_rc=(0.3, 0.3), step=0.3, origin=(5.0, 6.0, 7.0), series_number=4,
             description="12 bits stored", bits_stored=12, stored=(arr.view(np.uint16) & 0x0FFF))

arr = rng.integers(0, 60000, size=(6, 8, 8)).astype(np.uint16)
arr[:, :3, :3] = 1234  # runs for the RLE encoder
write_series(os.path.join(out, "rle_u16"), "rle_u16", arr, row_dir=(1, 0, 0), col_dir=(0, 1, 0),
             spacing_rc=(0.1, 0.1), step=0.1, origin=(0.0, 0.0, 0.0), series_number=5,
             description="RLE uint16", slope=1, intercept=-1024, syntax=RLELossless)

arr = rng.integers(0, 4096, size=(4, 6, 7)).astype(np.uint16)
write_series(os.path.join(out, "implicit_u16"), "implicit_u16", arr, row_dir=(0, 0, 1), col_dir=(1, 0, 0),
             spacing_rc=(0.7, 0.9), step=1.1, origin=(1.0, 1.0, 1.0), series_number=6,
             description="implicit VR", syntax=ImplicitVRLittleEndian)

a = rng.integers(0, 1000, size=(3, 4, 5)).astype(np.uint16)
b = rng.integers(0, 1000, size=(5, 6, 4)).astype(np.uint16)
folder = os.path.join(out, "two_series")
write_series(folder, "two_series_a", a, row_dir=(1, 0, 0), col_dir=(0, 1, 0), spacing_rc=(1, 1), step=1,
             origin=(0, 0, 0), series_number=7, description="first", names=[f"a{k}.dcm" for k in range(3)])
write_series(folder, "two_series_b", b, row_dir=(1, 0, 0), col_dir=(0, 1, 0), spacing_rc=(2, 2), step=3,
             origin=(0, 0, 50), series_number=8, description="second", names=[f"b{k}.dcm" for k in range(5)])
print(json.dumps(sorted(os.listdir(out))))
