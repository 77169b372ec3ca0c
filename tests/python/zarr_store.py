"""OME-Zarr stores against zarr-python and ome-zarr (the reference readers and writers).

check STORE SOURCE.nii
    Opens a store Sutura wrote with zarr-python and ome-zarr's reader and compares every level
    with the source read by nibabel: level 0 must equal the stored voxels bit for bit; level l
    must equal numpy's block mean of level 0 over the level's factor (edge blocks averaged over
    the voxels they have), rounded half to even for integers. Prints JSON.

write OUT_DIR
    Writes multiscale images with zarr-python in other layouts than Sutura's (Zarr v2 + NGFF
    0.4 with blosc, Zarr v3 + NGFF 0.5 with gzip and odd chunks, a leading channel axis), and
    the level-0 voxels as .npy beside each, for Sutura to open and compare, and `written.json`
    listing them (names relative to OUT_DIR). scripts/fetch_refdata.sh runs it once into
    target/refdata/zarr_made.
"""

import json
import sys

import numpy as np
import zarr


def block_mean(a, f):
    fz, fy, fx = f
    nz, ny, nx = a.shape
    pz, py, px = (-nz) % fz, (-ny) % fy, (-nx) % fx
    b = np.pad(a.astype(np.float64), ((0, pz), (0, py), (0, px)), constant_values=np.nan)
    b = b.reshape(b.shape[0] // fz, fz, b.shape[1] // fy, fy, b.shape[2] // fx, fx)
    return np.nanmean(b, axis=(1, 3, 5))


def check(store, source):
    import nibabel as nib
    from ome_zarr.io import parse_url
    from ome_zarr.reader import Reader

    img = nib.load(source)
    # stored values (no scaling), x fastest on disk -> numpy (z, y, x)
    src = np.asarray(img.dataobj.get_unscaled()).T
    group = zarr.open_group(store, mode="r")
    attrs = dict(group.attrs)
    ome = attrs["ome"]
    ms = ome["multiscales"][0]
    facts = attrs["sutura"]
    out = {"zarr_format": group.metadata.zarr_format, "ngff_version": ome["version"], "levels": []}
    for d, lf in zip(ms["datasets"], facts["levels"]):
        arr = group[d["path"]]
        data = arr[...]
        fx, fy, fz = lf["factor"]
        if (fx, fy, fz) == (1, 1, 1):
            equal = bool(data.dtype == src.dtype and np.array_equal(data, src))
        else:
            m = block_mean(src, (fz, fy, fx))
            want = m.astype(np.float32) if data.dtype == np.float32 else np.round(m).astype(data.dtype)
            equal = bool(np.array_equal(data, want, equal_nan=True))
        out["levels"].append({
            "path": d["path"],
            "shape": list(arr.shape),
            "dtype": str(arr.dtype),
            "chunks": list(arr.chunks),
            "scale": d["coordinateTransformations"][0]["scale"],
            "translation": d["coordinateTransformations"][1]["translation"],
            "equal": equal,
        })
    # ome-zarr's reader: the image node and its pyramid
    nodes = list(Reader(parse_url(store))())
    image = nodes[0]
    out["ome_zarr"] = {
        "levels": len(image.data),
        "shapes": [list(x.shape) for x in image.data],
        "axes": [a["name"] if isinstance(a, dict) else a for a in image.metadata["axes"]],
        "units": [a.get("unit") for a in image.metadata["axes"] if isinstance(a, dict)],
    }
    print(json.dumps(out))


def write(out_dir):
    import os

    from numcodecs import Blosc

    os.makedirs(out_dir, exist_ok=True)
    rng = np.random.default_rng(11)
    results = []
    # 1. Zarr v2, NGFF 0.4, blosc-zstd with bit shuffle, chunks (10, 12, 14), uint16
    a = rng.integers(0, 60000, size=(23, 31, 37), dtype=np.uint16)
    path = f"{out_dir}/v2.ome.zarr"
    g = zarr.open_group(path, mode="w", zarr_format=2)
    comp = Blosc(cname="zstd", clevel=3, shuffle=Blosc.BITSHUFFLE)
    g.create_array("0", data=a, chunks=(10, 12, 14), compressors=comp)
    g.create_array("1", data=a[::2, ::2, ::2], chunks=(5, 6, 7), compressors=comp)
    g.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": n, "type": "space", "unit": "micrometer"} for n in "zyx"],
        "datasets": [
            {"path": "0", "coordinateTransformations": [{"type": "scale", "scale": [4.0, 2.0, 3.0]},
                                                        {"type": "translation", "translation": [10.0, 20.0, 30.0]}]},
            {"path": "1", "coordinateTransformations": [{"type": "scale", "scale": [8.0, 4.0, 6.0]},
                                                        {"type": "translation", "translation": [10.0, 20.0, 30.0]}]},
        ],
    }]
    np.save(f"{out_dir}/v2.npy", a)
    results.append({"store": "v2.ome.zarr", "npy": "v2.npy", "spacing_mm_xyz": [0.003, 0.002, 0.004],
                    "origin_mm_xyz": [0.03, 0.02, 0.01], "level1_factor": [2, 2, 2]})
    # 2. Zarr v3, NGFF 0.5, gzip, chunks (7, 9, 11), int16 with a leading channel axis
    b = rng.integers(-3000, 3000, size=(1, 19, 21, 17), dtype=np.int16)
    path = f"{out_dir}/v3.ome.zarr"
    g = zarr.open_group(path, mode="w", zarr_format=3)
    g.create_array("s0", data=b, chunks=(1, 7, 9, 11), compressors=zarr.codecs.GzipCodec(level=5))
    g.attrs["ome"] = {"version": "0.5", "multiscales": [{
        "axes": [{"name": "c", "type": "channel"}] + [{"name": n, "type": "space", "unit": "millimeter"} for n in "zyx"],
        "datasets": [{"path": "s0", "coordinateTransformations": [{"type": "scale", "scale": [1.0, 0.5, 0.25, 0.125]}]}],
    }]}
    np.save(f"{out_dir}/v3.npy", b[0])
    results.append({"store": "v3.ome.zarr", "npy": "v3.npy", "spacing_mm_xyz": [0.125, 0.25, 0.5],
                    "origin_mm_xyz": [0.0, 0.0, 0.0]})
    with open(f"{out_dir}/written.json", "w") as f:
        json.dump(results, f, indent=1)


if __name__ == "__main__":
    if sys.argv[1] == "check":
        check(sys.argv[2], sys.argv[3])
    else:
        write(sys.argv[2])
