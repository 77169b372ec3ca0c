"""Reference for region growing: skimage.segmentation.flood.

Usage: prep_flood.py VOL.raw DTYPE NX NY NZ I J K TOLERANCE CONNECTIVITY OUT.raw
VOL.raw: the voxels (numpy dtype name DTYPE, x fastest). Voxels within +-TOLERANCE of the seed
(I, J, K)'s value, connected to it (CONNECTIVITY 1 = faces, 3 = faces, edges and corners), are
written as ones to OUT.raw; prints JSON with the count and the seed's value.
"""
import json
import sys

import numpy as np
from skimage.segmentation import flood


def main():
    path, dtype, nx, ny, nz, i, j, k, tol, conn, out = sys.argv[1:12]
    v = np.fromfile(path, dtype=np.dtype(dtype)).reshape(int(nz), int(ny), int(nx))
    seed = (int(k), int(j), int(i))
    m = flood(v, seed, tolerance=float(tol), connectivity=int(conn))
    m.astype(np.uint8).tofile(out)
    print(json.dumps({"count": int(m.sum()), "seed_value": float(v[seed])}))


main()
