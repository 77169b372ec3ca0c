"""Closed-form planar full Procrustes mean and complex full Procrustes distances.

Reference: Kent 1994 ("The complex Bingham distribution and shape analysis", J. R. Stat. Soc. B
56:285-299) and Dryden & Mardia 2016 (Statistical Shape Analysis, 2nd ed., §6.2 / result 6.?):
for centred complex configurations z_i, the full Procrustes mean is the eigenvector of the
largest eigenvalue of the complex sum of squares and products S = sum_i z_i z_i^* / (z_i^* z_i).
The full Procrustes distance between planar shapes is d_F^2 = 1 - |z^* w|^2 / (|z|^2 |w|^2).
"""
import json

import numpy as np

rng = np.random.default_rng(7)
k, n = 8, 40
base = rng.standard_normal(k) + 1j * rng.standard_normal(k)
configs = []
zs = []
for _ in range(n):
    z = base + 0.15 * (rng.standard_normal(k) + 1j * rng.standard_normal(k))
    z = z * np.exp(1j * rng.uniform(0, 2 * np.pi)) * rng.uniform(0.5, 4) + complex(*rng.uniform(-9, 9, 2))
    configs.append(np.column_stack([z.real, z.imag]).tolist())
    zc = z - z.mean()
    zs.append(zc / np.linalg.norm(zc))
S = sum(np.outer(z, z.conj()) for z in zs)
w, v = np.linalg.eigh(S)
mean = v[:, -1]
# Triangles: a random set of pairs, full Procrustes distance by the complex formula.
tris = []
for _ in range(10):
    t1 = rng.standard_normal((3, 2))
    t2 = rng.standard_normal((3, 2))
    z = t1[:, 0] + 1j * t1[:, 1]
    u = t2[:, 0] + 1j * t2[:, 1]
    z = z - z.mean()
    u = u - u.mean()
    df2 = 1 - abs(np.vdot(z, u)) ** 2 / (np.vdot(z, z).real * np.vdot(u, u).real)
    tris.append({"a": t1.tolist(), "b": t2.tolist(), "df2": float(df2)})
print(json.dumps({"configs": configs,
                  "mean": np.column_stack([mean.real, mean.imag]).tolist(),
                  "eigenvalue": float(w[-1]),
                  "triangles": tris}))
