"""Reference for region growing: skimage.segmentation.flood.

Usage: prep_flood.py VOL.raw DTYPE NX NY NZ I J K TOLERANCE CONNECTIVITY
VOL.raw: the voxels (numpy dtype name DTYPE, x fastest). Voxels within +-TOLERANCE of the seed
(I, J, K)'s value, connected to it (CONNECTIVITY 1 = faces, 3 = faces, edges and corners), are
the flood; prints JSON with its count, the SHA-256 of it as one byte (0/1) per voxel, x
fastest, and the seed's value.
"""
import hashlib
import json
import sys

import numpy as np
from skimage.segmentation import flood


def main():
    path, dtype, nx, ny, nz, i, j, k, tol, conn = sys.argv[1:11]
    v = np.fromfile(path, dtype=np.dtype(dtype)).reshape(int(nz), int(ny), int(nx))
    seed = (int(k), int(j), int(i))
    m = flood(v, seed, tolerance=float(tol), connectivity=int(conn))
    print(json.dumps({
        "count": int(m.sum()),
        "sha256": hashlib.sha256(m.astype(np.uint8).tobytes()).hexdigest(),
        "seed_value": float(v[seed]),
    }))


main()
