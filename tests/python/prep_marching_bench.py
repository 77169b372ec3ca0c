"""The scikit-image side of `cargo bench --bench prep`: marching_cubes on the bench volume.

Usage: prep_marching_bench.py VOL.raw N ISO
VOL.raw: N^3 uint16 voxels, x fastest. The volume is read and converted to float32 (what
marching_cubes computes in) before the clock starts; prints JSON with the seconds of
marching_cubes alone and the vertex count.
"""
import json
import sys
import time

import numpy as np
import skimage
from skimage import measure


def main():
    path, n, iso = sys.argv[1], int(sys.argv[2]), float(sys.argv[3])
    v = np.fromfile(path, dtype="<u2").reshape(n, n, n).astype(np.float32)
    t = time.perf_counter()
    verts, faces, _, _ = measure.marching_cubes(v, level=iso)
    seconds = time.perf_counter() - t
    print(json.dumps({"seconds": seconds, "vertices": int(len(verts)), "version": skimage.__version__}))


main()
