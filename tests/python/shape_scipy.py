"""Reference values from scipy's Procrustes routines for tests/shape_reference.rs.

Sources:
- scipy.spatial.procrustes docstring example (scipy 1.x, scipy/spatial/_procrustes.py):
  a = [[1, 3], [1, 2], [1, 1], [2, 1]], b = [[4, -2], [4, -4], [4, -6], [2, -6]], disparity ~ 0.
- scipy.linalg.orthogonal_procrustes docstring example (scipy/linalg/_procrustes.py):
  A = [[2, 0, 1], [-2, 0, 0]], B = fliplr(A), R = [[0, 0, 1], [0, 1, 0], [1, 0, 0]].
scipy allows reflections (its R is any orthogonal matrix); Sutura does not. The script also
gives, for each planar case, the proper-rotation full Procrustes distance from the complex
formula d_F^2 = 1 - |z* w|^2 / (|z|^2 |w|^2) for centred complex configurations
(Dryden & Mardia 2016, Statistical Shape Analysis 2nd ed., eq. 3.9 / Kent 1994), which is an
independent check of the answer we give where scipy reflects.
"""
import json

import numpy as np
from scipy.linalg import orthogonal_procrustes
from scipy.spatial import procrustes


def complex_df2(a, b):
    z = a[:, 0] + 1j * a[:, 1]
    w = b[:, 0] + 1j * b[:, 1]
    z = z - z.mean()
    w = w - w.mean()
    return float(1 - abs(np.vdot(z, w)) ** 2 / (np.vdot(z, z).real * np.vdot(w, w).real))


def rand_rotation(rng, m):
    q, r = np.linalg.qr(rng.standard_normal((m, m)))
    q = q * np.sign(np.diag(r))
    if np.linalg.det(q) < 0:
        q[:, 0] *= -1
    return q


def case(a, b):
    _, _, disparity = procrustes(a, b)
    # scipy's rotation of b onto a after its own standardisation.
    a0 = (a - a.mean(0)) / np.linalg.norm(a - a.mean(0))
    b0 = (b - b.mean(0)) / np.linalg.norm(b - b.mean(0))
    r, s = orthogonal_procrustes(a0, b0)
    out = {"a": a.tolist(), "b": b.tolist(), "scipy_disparity": float(disparity),
           "scipy_det": float(np.linalg.det(r)), "scipy_scale": float(s)}
    if a.shape[1] == 2:
        out["complex_df2"] = complex_df2(a, b)
    return out


rng = np.random.default_rng(20261202)
out = {}

# Docstring example of scipy.spatial.procrustes.
a = np.array([[1, 3], [1, 2], [1, 1], [2, 1]], "d")
b = np.array([[4, -2], [4, -4], [4, -6], [2, -6]], "d")
out["procrustes_doc"] = case(a, b)

# Docstring example of scipy.linalg.orthogonal_procrustes (no centring, no scaling).
A = np.array([[2, 0, 1], [-2, 0, 0]], "d")
B = np.fliplr(A)
R, sca = orthogonal_procrustes(A, B)
out["orthogonal_doc"] = {"a": A.tolist(), "b": B.tolist(), "r": R.tolist(), "scale": float(sca),
                         "residual": float(np.linalg.norm(A @ R - B)),
                         "det": float(np.linalg.det(R))}

# Cases where the optimum is a proper rotation anyway: b = similarity(a) + small noise.
cases = []
for m, k in ((2, 6), (3, 5), (3, 12), (2, 15), (3, 30)):
    a = rng.standard_normal((k, m)) * np.arange(1, m + 1)[::-1]
    b = (a @ rand_rotation(rng, m)) * rng.uniform(0.3, 3) + rng.uniform(-5, 5, m)
    b = b + 0.05 * rng.standard_normal(b.shape)
    cases.append(case(a, b))
# Also uncentred orthogonal_procrustes on a 3D case with a proper optimum.
a = rng.standard_normal((8, 3))
b = a @ rand_rotation(rng, 3) + 0.01 * rng.standard_normal((8, 3))
r, s = orthogonal_procrustes(a, b)
out["orthogonal_3d"] = {"a": a.tolist(), "b": b.tolist(), "r": r.tolist(), "scale": float(s),
                        "det": float(np.linalg.det(r))}
out["proper_cases"] = cases

# A chiral 3D configuration and its mirror image: scipy reflects it back (disparity ~ 0).
a = rng.standard_normal((7, 3)) * np.array([3.0, 2.0, 1.0])
b = a * np.array([1.0, 1.0, -1.0])
out["mirror_3d"] = case(a, b)
print(json.dumps(out))
