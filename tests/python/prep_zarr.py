"""Opens a label image with zarr-python and reports what it holds.

Usage: prep_zarr.py DIR
Prints JSON: the array's shape, dtype and chunk shape, the zarr format, the group's `ome`
attributes, and the number of voxels of each label value.
"""
import json
import sys

import numpy as np
import zarr


def main():
    g = zarr.open_group(sys.argv[1], mode="r")
    a = g["0"]
    data = a[...]
    values, counts = np.unique(data, return_counts=True)
    print(json.dumps({
        "zarr_format": g.metadata.zarr_format,
        "shape": list(a.shape),
        "dtype": str(a.dtype),
        "chunks": list(a.chunks),
        "ome": g.attrs["ome"],
        "counts": {str(int(v)): int(c) for v, c in zip(values, counts)},
    }))


main()
