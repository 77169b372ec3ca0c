#!/usr/bin/env python3
"""Writes a large synthetic scan for the scan-size benchmark: an N x N x N uint16 NIfTI-1 file
(10 um voxels) of a block of matrix with grains and an ellipsoidal shell of "bone" in it,
written slab by slab so that the script's memory stays at one slab whatever N is.

Usage: make_big_scan.py OUT.nii N   (N = 2400 gives a 27.6 GB file, more than most machines'
memory). The data are invented for the benchmark only."""

import struct
import sys

import numpy as np


def header(n: int) -> bytes:
    h = bytearray(348)
    struct.pack_into("<i", h, 0, 348)  # sizeof_hdr
    struct.pack_into("<8h", h, 40, 3, n, n, n, 1, 1, 1, 1)  # dim
    struct.pack_into("<h", h, 70, 512)  # datatype: uint16
    struct.pack_into("<h", h, 72, 16)  # bitpix
    struct.pack_into("<8f", h, 76, 1.0, 0.01, 0.01, 0.01, 0, 0, 0, 0)  # pixdim (mm)
    struct.pack_into("<f", h, 108, 352.0)  # vox_offset
    struct.pack_into("<f", h, 112, 1.0)  # scl_slope
    h[123] = 2  # xyzt_units: mm
    struct.pack_into("<h", h, 252, 0)  # qform_code
    struct.pack_into("<h", h, 254, 1)  # sform_code: scanner
    struct.pack_into("<4f", h, 280, 0.01, 0, 0, 0)  # srow_x
    struct.pack_into("<4f", h, 296, 0, 0.01, 0, 0)  # srow_y
    struct.pack_into("<4f", h, 312, 0, 0, 0.01, 0)  # srow_z
    h[344:348] = b"n+1\0"
    return bytes(h) + b"\0\0\0\0"


def main() -> None:
    out, n = sys.argv[1], int(sys.argv[2])
    rng = np.random.default_rng(20261203)
    c = (n - 1) / 2.0
    y, x = np.mgrid[0:n, 0:n].astype(np.float32)
    slab = 32
    with open(out, "wb") as f:
        f.write(header(n))
        for z0 in range(0, n, slab):
            z = np.arange(z0, min(n, z0 + slab), dtype=np.float32)[:, None, None]
            # an ellipsoidal shell (semi-axes 0.40, 0.30, 0.25 of the block), 3 % of n thick
            r = np.sqrt(((x - c) / (0.40 * n)) ** 2 + ((y - c) / (0.30 * n)) ** 2
                        + ((z - c) / (0.25 * n)) ** 2)
            shell = np.abs(r - 1.0) < 0.03
            vol = np.full(shell.shape, 12000, dtype=np.uint16)
            vol[shell] = 30000
            vol += rng.integers(0, 2000, size=vol.shape, dtype=np.uint16)
            f.write(vol.tobytes())
            print(f"{min(n, z0 + slab)}/{n}", flush=True)


if __name__ == "__main__":
    main()
