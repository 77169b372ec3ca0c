"""Reference for iso-surfaces: skimage.measure.marching_cubes and mesh_surface_area.

Usage: prep_marching.py VOL.raw NX NY NZ SX SY SZ ISO
VOL.raw: float32 voxels, x fastest. Prints JSON: vertex and face counts, the area from
mesh_surface_area, and the enclosed volume (divergence theorem over the faces, in numpy).
"""
import json
import sys

import numpy as np
from skimage import measure


def main():
    path, nx, ny, nz, sx, sy, sz, iso = sys.argv[1:9]
    v = np.fromfile(path, dtype=np.float32).reshape(int(nz), int(ny), int(nx))
    verts, faces, _normals, _values = measure.marching_cubes(
        v, level=float(iso), spacing=(float(sz), float(sy), float(sx))
    )
    area = measure.mesh_surface_area(verts, faces)
    a, b, c = verts[faces[:, 0]], verts[faces[:, 1]], verts[faces[:, 2]]
    volume = np.einsum("ij,ij->i", a, np.cross(b, c)).sum() / 6.0
    print(json.dumps({
        "vertices": int(len(verts)),
        "faces": int(len(faces)),
        "area": float(area),
        "volume": float(abs(volume)),
    }))


main()
