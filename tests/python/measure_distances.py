"""Reference distances from nibabel's affine (reference: nibabel 5.x, `img.affine`).

Usage: measure_distances.py JSON ; JSON is a list of {"file": PATH, "voxels": [[i, j, k], ...]}.
For each file, maps every voxel coordinate to world millimetres with nibabel's affine
(nib.affines.apply_affine) and prints, per file, the distances from the first voxel to each of
the others (numpy.linalg.norm), as a JSON list of lists.
"""
import json
import sys

import nibabel as nib
import numpy as np

out = []
for entry in json.loads(sys.argv[1]):
    img = nib.load(entry["file"])
    world = nib.affines.apply_affine(img.affine, np.asarray(entry["voxels"], dtype=np.float64))
    out.append([float(np.linalg.norm(w - world[0])) for w in world[1:]])
print(json.dumps(out))
