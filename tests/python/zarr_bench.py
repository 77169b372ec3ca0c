"""zarr-python's times for the store benchmark (benches/store.rs).

zarr_bench.py SOURCE.nii STORE
    write_s: writing the source's voxels (read into memory first, not timed) as a Zarr v3 array
    in 64³ chunks with zstd level 1, zarr-python's own parallel writer; plane_s: reading the
    middle z plane of level 0 of Sutura's STORE (a fresh open, median of three). Prints JSON.
"""

import json
import shutil
import sys
import tempfile
import time

import nibabel as nib
import numpy as np
import zarr


def main(source, store):
    a = np.ascontiguousarray(np.asarray(nib.load(source).dataobj.get_unscaled()).T)
    d = tempfile.mkdtemp()
    try:
        t = time.perf_counter()
        z = zarr.create_array(f"{d}/w.zarr", shape=a.shape, dtype=a.dtype, chunks=(64, 64, 64),
                              compressors=zarr.codecs.ZstdCodec(level=1))
        z[...] = a
        write_s = time.perf_counter() - t
    finally:
        shutil.rmtree(d)
    times = []
    for _ in range(3):
        g = zarr.open_group(store, mode="r")
        arr = g["0"]
        t = time.perf_counter()
        _ = arr[arr.shape[0] // 2, :, :]
        times.append(time.perf_counter() - t)
    times.sort()
    print(json.dumps({"write_s": write_s, "plane_s": times[1]}))


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
