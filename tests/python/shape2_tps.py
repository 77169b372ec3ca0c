"""Reference thin-plate-spline warps and bending energies for tests/shape2_reference.rs.

Input: one JSON argument {"source": [[...]], "target": [[...]], "points": [[...]]}.
Output: {"warp": [[...]], "energy": float}.

- warp: scipy.interpolate.RBFInterpolator with degree=1 and smoothing=0 (exact interpolation),
  kernel='thin_plate_spline' (r^2 log r) in 2D and kernel='linear' (-r) in 3D
  (reference: scipy 1.x, scipy/interpolate/_rbfinterp.py kernel table).
- energy: tr(Y^T B Y) with B the upper-left k x k block of inv(L), L = [[K, P], [P^T, 0]]
  (Bookstein 1989, Principal warps, IEEE PAMI 11(6), eqs. 3-4), built here with numpy.
"""

import json
import sys

import numpy as np
from scipy.interpolate import RBFInterpolator
from scipy.spatial.distance import cdist


def kernel(r, m):
    if m == 2:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(r > 0, r * r * np.log(np.where(r > 0, r, 1.0)), 0.0)
    return -r


def main():
    data = json.loads(sys.argv[1])
    src = np.asarray(data["source"], dtype=float)
    tgt = np.asarray(data["target"], dtype=float)
    pts = np.asarray(data["points"], dtype=float)
    k, m = src.shape
    name = "thin_plate_spline" if m == 2 else "linear"
    interp = RBFInterpolator(src, tgt, kernel=name, degree=1, smoothing=0.0)
    warp = interp(pts)
    K = kernel(cdist(src, src), m)
    P = np.hstack([np.ones((k, 1)), src])
    L = np.zeros((k + m + 1, k + m + 1))
    L[:k, :k] = K
    L[:k, k:] = P
    L[k:, :k] = P.T
    B = np.linalg.inv(L)[:k, :k]
    energy = float(np.trace(tgt.T @ B @ tgt))
    print(json.dumps({"warp": warp.tolist(), "energy": energy}))


if __name__ == "__main__":
    main()
