"""Writes a synthetic N³ uint16 NIfTI-1 scan slice by slice, for the large-scan figures
(`scripts/big_scan_figures.sh`): memory stays at a few slices whatever N is.

The scan: a thick spherical shell (a "braincase") with a denser inner sphere, on a matrix
of low values, with seeded noise, voxel size 10 µm. Invented data for benchmarks only.

usage: make_big_scan.py OUT.nii N
"""

import sys

import nibabel as nib
import numpy as np


def main(out, n):
    hdr = nib.Nifti1Header()
    hdr.set_data_shape((n, n, n))
    hdr.set_data_dtype(np.uint16)
    hdr.set_zooms((0.01, 0.01, 0.01))
    hdr.set_xyzt_units("mm")
    hdr.set_qform(np.diag([0.01, 0.01, 0.01, 1.0]), code=1)
    hdr.set_sform(np.diag([0.01, 0.01, 0.01, 1.0]), code=1)
    hdr["vox_offset"] = 352
    rng = np.random.default_rng(7)
    c = (n - 1) / 2.0
    y, x = np.mgrid[0:n, 0:n].astype(np.float32)
    d2xy = (x - c) ** 2 + (y - c) ** 2
    with open(out, "wb") as f:
        f.write(hdr.binaryblock)
        f.write(b"\0\0\0\0")
        for k in range(n):
            r = np.sqrt(d2xy + (k - c) ** 2) / (n / 2.0)
            s = np.full((n, n), 1200.0, dtype=np.float32)
            s[(r > 0.55) & (r < 0.75)] = 21000.0
            s[r < 0.25] = 9000.0
            s += rng.normal(0.0, 300.0, size=(n, n)).astype(np.float32)
            # x fastest on disk: numpy's (y, x) slice in C order
            f.write(np.clip(s, 0, 65535).astype("<u2").tobytes())
            if k % 200 == 0:
                print(f"slice {k} of {n}", file=sys.stderr, flush=True)


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]))
