"""Reference trilinear values: scipy.ndimage.map_coordinates(order=1) at given voxel coordinates.

Usage: render_map_coordinates.py VOLUME.raw DTYPE NX NY NZ COORDS.f64
  VOLUME.raw  little-endian voxels, i fastest (then j, then k)
  DTYPE       numpy dtype string of the voxels, e.g. "<u2" or "<f4"
  COORDS.f64  little-endian float64 triples (i, j, k), one per point
Prints {"values": [...]} with one value per point.
"""

import json
import sys

import numpy as np
from scipy import ndimage


def main() -> None:
    vol_path, dtype, nx, ny, nz, coords_path = sys.argv[1:7]
    nx, ny, nz = int(nx), int(ny), int(nz)
    # i fastest in memory: C order with shape (nz, ny, nx), indexed [k, j, i]
    vol = np.fromfile(vol_path, dtype=np.dtype(dtype)).reshape((nz, ny, nx))
    ijk = np.fromfile(coords_path, dtype="<f8").reshape((-1, 3))
    # map_coordinates takes one row of coordinates per array axis: (k, j, i)
    coords = np.stack([ijk[:, 2], ijk[:, 1], ijk[:, 0]])
    values = ndimage.map_coordinates(vol.astype(np.float64), coords, order=1, mode="nearest")
    print(json.dumps({"values": values.tolist(), "scipy": __import__("scipy").__version__}))


if __name__ == "__main__":
    main()
