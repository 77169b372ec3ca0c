"""Writes reference TIFF files with tifffile (reference: tifffile imwrite/imread).

Usage: tiff_write_refs.py OUTDIR

Run once by scripts/fetch_refdata.sh into target/refdata/tifffile; the tests read the files
there, and tifffile's own reading of them (tiff_read_refs.py) is their committed fixture. For
every case: OUTDIR/<name>.tif, or the folder OUTDIR/folder of slices; every file is read back
and checked against what was written. Voxels come from a seeded generator (numpy
default_rng(20261202)), so the files are the same on every run. Prints the case names as JSON.
"""
import json
import os
import sys

import numpy as np
import tifffile

out = sys.argv[1]
os.makedirs(out, exist_ok=True)
rng = np.random.default_rng(20261202)
SHAPE = (3, 35, 40)  # pages, rows, columns: partial tiles and strips on purpose


def data(dtype):
    if dtype == "u8":
        return rng.integers(0, 256, SHAPE, dtype=np.uint8)
    if dtype == "u16":
        # smooth plus noise, so that predictors and compressors have something to do
        base = np.add.outer(np.arange(35), np.arange(40)) * 700
        return (base[None] + rng.integers(0, 300, SHAPE)).astype(np.uint16)
    if dtype == "i16":
        return rng.integers(-32768, 32768, SHAPE, dtype=np.int16)
    a = rng.normal(0, 1000, SHAPE).astype(np.float32)
    a[0, 0, :4] = [np.inf, -np.inf, -0.0, 1e-40]  # specials and a subnormal
    return a


NP = {"u8": np.uint8, "u16": np.uint16, "i16": np.int16, "f32": np.float32}
cases = []


def record(name, path, expect, **meta):
    cases.append(dict(name=name, **meta))


# compression names as tifffile takes them; 8 = Adobe Deflate, 32946 = old Deflate code
COMPRESSIONS = {"none": None, "lzw": "lzw", "zlib8": "zlib", "deflate32946": 32946, "packbits": "packbits"}
for dtype in ["u8", "u16", "i16", "f32"]:
    for cname, comp in COMPRESSIONS.items():
        predictors = ["none"]
        if comp is not None:
            # tifffile allows the horizontal predictor for integers only, 3 for floats
            predictors.append("float" if dtype == "f32" else "horizontal")
        for pred in predictors:
            for order in ["<", ">"]:
                for layout in ["strips", "tiles"]:
                    a = data(dtype)
                    name = f"{dtype}_{cname}_{pred}_{'le' if order == '<' else 'be'}_{layout}"
                    path = os.path.join(out, name + ".tif")
                    kw = dict(
                        photometric="minisblack",
                        byteorder=order,
                        compression=comp,
                        predictor={"none": None, "horizontal": 2, "float": 3}[pred],
                        metadata=None,
                    )
                    if layout == "tiles":
                        kw["tile"] = (16, 16)
                    else:
                        kw["rowsperstrip"] = 8
                    tifffile.imwrite(path, a, **kw)
                    back = tifffile.imread(path)
                    assert np.array_equal(back, a, equal_nan=True)
                    record(name, path, back, dtype=dtype, compression=cname, predictor=pred,
                           byteorder=order, layout=layout)

# BigTIFF, both byte orders, uncompressed and Deflate
for order in ["<", ">"]:
    for comp in [None, "zlib"]:
        a = data("u16")
        name = f"bigtiff_u16_{comp or 'none'}_{'le' if order == '<' else 'be'}"
        path = os.path.join(out, name + ".tif")
        tifffile.imwrite(path, a, bigtiff=True, byteorder=order, compression=comp,
                         photometric="minisblack", metadata=None)
        record(name, path, tifffile.imread(path), dtype="u16", compression=str(comp),
               byteorder=order, layout="bigtiff")

# resolution tags: 80 pixels per centimetre = 0.125 mm
a = data("u8")
path = os.path.join(out, "resolution_cm.tif")
tifffile.imwrite(path, a, resolution=(80, 80), resolutionunit="CENTIMETER",
                 photometric="minisblack", metadata=None)
record("resolution_cm", path, tifffile.imread(path), dtype="u8", spacing_mm=10 / 80)

# a folder of single-page slices, written out of order and with names that sort wrong as text
folder = os.path.join(out, "folder")
os.makedirs(folder, exist_ok=True)
a = data("i16")
for k in range(a.shape[0]):
    tifffile.imwrite(os.path.join(folder, f"s{k * 5}.tif"), a[k], photometric="minisblack",
                     compression="zlib", metadata=None)
with open(os.path.join(folder, "readme.txt"), "w") as f:
    f.write("not a slice")
names = sorted((n for n in os.listdir(folder) if n.endswith(".tif")),
               key=lambda n: int(n[1:-4]))
stack = np.stack([tifffile.imread(os.path.join(folder, n)) for n in names])
record("folder", folder, stack, dtype="i16", layout="folder")

json.dump(cases, sys.stdout)
