"""zarr-python's times for the store benchmark (benches/store.rs).

zarr_bench.py SOURCE.nii STORE
    write_s: writing the source's voxels (read into memory first, not timed) as a Zarr v3 array
    in 64³ chunks with zstd level 1, zarr-python's own parallel writer; plane_s: reading a z
    plane of level 0 of Sutura's STORE at a third, half and two thirds of its depth (a fresh
    open each, three rounds, the median of the nine); plane_x_s: the middle x plane (median of
    three). Prints JSON.
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
    def plane(index):
        arr = zarr.open_group(store, mode="r")["0"]
        t = time.perf_counter()
        _ = arr[index(arr.shape)]
        return time.perf_counter() - t

    z = sorted(plane(lambda s, f=f: (int(s[0] * f), slice(None), slice(None)))
               for _ in range(3) for f in (1 / 3, 1 / 2, 2 / 3))
    x = sorted(plane(lambda s: (slice(None), slice(None), s[2] // 2)) for _ in range(3))
    print(json.dumps({"write_s": write_s, "plane_s": z[len(z) // 2], "plane_x_s": x[1]}))


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
