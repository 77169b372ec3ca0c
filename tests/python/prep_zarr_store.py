"""Opens a scan's OME-Zarr store with zarr-python and reports the label images it lists.

Usage: prep_zarr_store.py STORE
Prints JSON: the `ome.labels` list of the store's `labels` group and, for each label image
listed, its array `0`'s shape, dtype and chunks, the number of voxels of each label value, and
the group's `image-label` source (NGFF 0.5 label images).
"""
import json
import sys

import numpy as np
import zarr


def main():
    root = zarr.open_group(sys.argv[1], mode="r")
    labels = root["labels"]
    names = labels.attrs["ome"]["labels"]
    out = {"labels": names, "images": {}}
    for name in names:
        g = labels[name]
        a = g["0"]
        values, counts = np.unique(a[...], return_counts=True)
        out["images"][name] = {
            "shape": list(a.shape),
            "dtype": str(a.dtype),
            "chunks": list(a.chunks),
            "source": g.attrs["ome"]["image-label"].get("source"),
            "counts": {str(int(v)): int(c) for v, c in zip(values, counts)},
        }
    # the scan's own image beside them
    out["image_shape"] = list(root["0"].shape)
    print(json.dumps(out))


main()
