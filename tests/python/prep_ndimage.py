"""Reference for virtual preparation: scipy.ndimage morphology, hole filling and piece labels.

Usage: prep_ndimage.py MASK.raw NX NY NZ SX SY SZ RADIUS_MM
MASK.raw holds one byte per voxel (non-zero set), x fastest (a (z, y, x) C-order array).
The structuring element is the ball of RADIUS_MM in physical units: every offset (di, dj, dk)
with (di*sx)^2 + (dj*sy)^2 + (dk*sz)^2 <= r^2 (1 + 1e-9). Prints JSON with, for erode, dilate,
open, close and fill, the voxel count and the SHA-256 of the result as one byte (0/1) per voxel,
x fastest; and the piece sizes of scipy.ndimage.label with face (6) and full (26)
connectivity, in label order.
"""
import hashlib
import json
import sys

import numpy as np
from scipy import ndimage


def ball(r, s):
    reach = [int(np.floor(r / x * (1 + 1e-9))) for x in s]  # x, y, z
    rk, rj, ri = reach[2], reach[1], reach[0]
    dk, dj, di = np.meshgrid(
        np.arange(-rk, rk + 1), np.arange(-rj, rj + 1), np.arange(-ri, ri + 1), indexing="ij"
    )
    d2 = (di * s[0]) ** 2 + (dj * s[1]) ** 2 + (dk * s[2]) ** 2
    return d2 <= r * r * (1 + 1e-9)


def main():
    path, nx, ny, nz, sx, sy, sz, r = sys.argv[1:9]
    nx, ny, nz = int(nx), int(ny), int(nz)
    s = [float(sx), float(sy), float(sz)]
    m = np.fromfile(path, dtype=np.uint8).reshape(nz, ny, nx) != 0
    se = ball(float(r), s)
    res = {
        "erode": ndimage.binary_erosion(m, structure=se),
        "dilate": ndimage.binary_dilation(m, structure=se),
        "open": ndimage.binary_opening(m, structure=se),
        "close": ndimage.binary_closing(m, structure=se),
        "fill": ndimage.binary_fill_holes(m),
    }
    report = {"structuring_element_voxels": int(se.sum())}
    for k, v in res.items():
        report[k] = {
            "count": int(v.sum()),
            "sha256": hashlib.sha256(v.astype(np.uint8).tobytes()).hexdigest(),
        }
    for name, conn in (("sizes6", 1), ("sizes26", 3)):
        lab, n = ndimage.label(m, structure=ndimage.generate_binary_structure(3, conn))
        report[name] = [int(c) for c in np.bincount(lab.ravel())[1:]]
    print(json.dumps(report))


main()
