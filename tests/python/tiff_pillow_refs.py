"""Classifies the TIFF test images of Pillow's source distribution with tifffile.

Usage: tiff_pillow_refs.py IMAGES_DIR

Every file under IMAGES_DIR named *.tif/*.tiff, or starting with a TIFF signature, gets one of:
  ok           tifffile reads all pages as one single-channel stack of u8/u16/i16/f32 with a
               compression Sutura reads; voxels_sha256 is the SHA-256 of its voxels (little-endian, z-y-x)
  unsupported  tifffile reads page 0 but it is multi-channel / colour / palette, another sample
               type, or another compression: Sutura must refuse it as unsupported
  inconsistent pages of different shape or type
  error        tifffile cannot read it (a damaged or deliberately malformed file)
and "damaged": the warnings tifffile logged while working around a damaged structure.
Prints a JSON list. Reference: tifffile (TiffFile.pages, TiffPage.asarray).
"""
import hashlib
import json
import logging
import os
import sys
import warnings

import numpy as np
import tifffile

warnings.simplefilter("ignore")
images = sys.argv[1]
SIGNATURES = (b"II*\0", b"MM\0*", b"II+\0", b"MM\0+")
DTYPES = {np.dtype(np.uint8): "u8", np.dtype(np.uint16): "u16", np.dtype(np.int16): "i16",
          np.dtype(np.float32): "f32"}
COMPRESSIONS = {1, 5, 8, 32773, 32946}  # none, LZW, Adobe Deflate, PackBits, Deflate
MAX_ELEMENTS = 1 << 26  # do not let a hostile header make the reference allocate gigabytes

files = []
for root, _dirs, names in os.walk(images):
    for n in names:
        p = os.path.join(root, n)
        try:
            with open(p, "rb") as f:
                head = f.read(4)
        except OSError:
            continue
        if n.lower().endswith((".tif", ".tiff")) or head in SIGNATURES:
            files.append(p)
files.sort()


def page_kind(page):
    if page.samplesperpixel != 1 or int(page.photometric) not in (0, 1):
        return "unsupported", f"{page.samplesperpixel} samples, photometric {int(page.photometric)}"
    if page.dtype is None or np.dtype(page.dtype) not in DTYPES or page.bitspersample not in (8, 16, 32):
        return "unsupported", f"dtype {page.dtype}, {page.bitspersample} bits"
    if int(page.compression) not in COMPRESSIONS:
        return "unsupported", f"compression {int(page.compression)}"
    return None, ""


class Complaints(logging.Handler):
    """Collects what tifffile logs about a file (damaged structure it worked around)."""

    def __init__(self):
        super().__init__(logging.WARNING)
        self.seen = []

    def emit(self, record):
        self.seen.append(record.getMessage()[:200])


complaints = Complaints()
logging.getLogger("tifffile").addHandler(complaints)
logging.getLogger("tifffile").propagate = False

result = []
for i, p in enumerate(files):
    entry = {"path": p}
    complaints.seen = []
    try:
        with tifffile.TiffFile(p) as tif:
            pages = list(tif.pages)
            if not pages:
                raise ValueError("no pages")
            first = pages[0]
            kind, why = page_kind(first)
            if kind is None:
                arrays = []
                for k, page in enumerate(pages):
                    pk, pwhy = page_kind(page)
                    if pk is not None or page.shape != first.shape or page.dtype != first.dtype:
                        kind, why = "inconsistent", f"page {k}: {page.shape} {page.dtype} {pwhy}"
                        break
                    if int(np.prod(page.shape)) > MAX_ELEMENTS:
                        raise ValueError("page too large for the reference")
                    arrays.append(page.asarray())
                else:
                    a = np.stack(arrays)
                    le = np.ascontiguousarray(a.astype(a.dtype.newbyteorder("<")))
                    kind = "ok"
                    entry.update(voxels_sha256=hashlib.sha256(le.tobytes()).hexdigest(),
                                 dtype=DTYPES[a.dtype.newbyteorder("=")], shape=list(a.shape))
            entry.update(kind=kind, why=why)
    except Exception as e:  # any failure of the reference reader counts as "cannot read"
        entry.update(kind="error", why=f"{type(e).__name__}: {e}"[:200])
    # tifffile read it but logged that the structure is damaged (wrong counts, IFD cycles)
    entry["damaged"] = complaints.seen
    result.append(entry)

json.dump(result, sys.stdout)
