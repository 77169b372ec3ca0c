"""Reference reading of TIFF files by tifffile (reference: tifffile TiffFile / imread).

Usage: tiff_read_refs.py PATH... ; prints a JSON list, one entry per path. A PATH is a TIFF file
(all pages read as one z-y-x stack) or a folder of single-page slices (every *.tif in it, in
natural order of the numbers in their names, stacked). Each entry: name (file or folder name
without .tif), dtype (u8/u16/i16/f32), shape (z, y, x), voxels_sha256 (SHA-256 of the voxels
as little-endian bytes in z-y-x order), and spacing_mm when the first page carries resolution
tags in centimetres or inches (10 / XResolution, or 25.4 / XResolution).
"""
import hashlib
import json
import os
import re
import sys

import numpy as np
import tifffile

DTYPES = {np.dtype(np.uint8): "u8", np.dtype(np.uint16): "u16", np.dtype(np.int16): "i16",
          np.dtype(np.float32): "f32"}


def natural(name):
    return [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", name)]


def spacing_mm(path):
    with tifffile.TiffFile(path) as tif:
        tags = tif.pages[0].tags
        if "XResolution" not in tags or "ResolutionUnit" not in tags:
            return None
        num, den = tags["XResolution"].value
        per_unit = num / den
        unit = int(tags["ResolutionUnit"].value)
    mm = {2: 25.4, 3: 10.0}.get(unit)
    return None if mm is None or per_unit <= 0 else mm / per_unit


def describe(path):
    if os.path.isdir(path):
        names = sorted((n for n in os.listdir(path) if n.lower().endswith(".tif")), key=natural)
        files = [os.path.join(path, n) for n in names]
        a = np.stack([tifffile.imread(f) for f in files])
        first = files[0]
        name = os.path.basename(path.rstrip("/"))
    else:
        a = tifffile.imread(path)
        if a.ndim == 2:
            a = a[np.newaxis]
        first = path
        name = os.path.basename(path)[: -len(".tif")]
    le = a.astype(a.dtype.newbyteorder("<"), copy=False)
    return {
        "name": name,
        "dtype": DTYPES[a.dtype.newbyteorder("=")],
        "shape": list(a.shape),
        "voxels_sha256": hashlib.sha256(np.ascontiguousarray(le).tobytes()).hexdigest(),
        "spacing_mm": spacing_mm(first),
    }


print(json.dumps([describe(p) for p in sys.argv[1:]]))
