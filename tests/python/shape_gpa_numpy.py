"""Batched numpy GPA, the algorithm of the project's Python baseline kit
(/work/shared/bench/py_baseline.py, gpa_vectorized): centre, unit centroid size, the first
specimen as the initial mean, then rotate every specimen onto the mean by SVD with the
reflection excluded, average, rescale the mean to unit size, until ||M_new - M_old||_F < tol.
Data follow that kit's make_landmarks (a base shape plus noise, random proper rotations,
scales and translations), small here. Usage: shape_gpa_numpy.py N L DIM [--out FILE.npy]
"""
import json
import sys
import time

import numpy as np


def make_landmarks(n, L, m, seed=1):
    rng = np.random.default_rng(seed)
    base = rng.standard_normal((L, m)) * np.array([3.0, 2.0, 1.0])[:m]
    X = base[None] + 0.05 * rng.standard_normal((n, L, m))
    Q, Rr = np.linalg.qr(rng.standard_normal((n, m, m)))
    Q = Q * np.sign(np.diagonal(Rr, axis1=1, axis2=2))[:, None, :]
    det = np.linalg.det(Q)
    Q[:, :, 0] *= det[:, None]
    s = rng.uniform(0.5, 2.0, n)[:, None, None]
    t = rng.uniform(-10, 10, (n, 1, m))
    return np.matmul(X, Q) * s + t


def gpa_vectorized(X, tol=1e-10, max_iter=200):
    X = X - X.mean(axis=1, keepdims=True)
    X = X / np.sqrt((X ** 2).sum(axis=(1, 2)))[:, None, None]
    M = X[0].copy()
    delta = np.inf
    for it in range(1, max_iter + 1):
        H = np.matmul(X.transpose(0, 2, 1), M)
        U, _, Vt = np.linalg.svd(H)
        dsign = np.sign(np.linalg.det(np.matmul(U, Vt)))
        U[:, :, -1] *= dsign[:, None]
        X = np.matmul(X, np.matmul(U, Vt))
        Mn = X.mean(axis=0)
        Mn /= np.sqrt((Mn ** 2).sum())
        delta = np.sqrt(((Mn - M) ** 2).sum())
        M = Mn
        if delta < tol:
            break
    return X, M, it, delta


n, L, m = (int(v) for v in sys.argv[1:4])
X0 = make_landmarks(n, L, m)
if "--out" in sys.argv:
    # Benchmark mode: save the data, time the batched GPA (median of 3), print figures only.
    np.save(sys.argv[sys.argv.index("--out") + 1], X0)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        Xa, M, it, delta = gpa_vectorized(X0)
        times.append(time.perf_counter() - t0)
    print(json.dumps({"seconds": sorted(times)[1], "iterations": it, "final_delta": float(delta),
                      "mean": M.tolist()}))
else:
    Xa, M, it, delta = gpa_vectorized(X0)
    print(json.dumps({"input": X0.tolist(), "aligned": Xa.tolist(), "mean": M.tolist(),
                      "iterations": it, "final_delta": float(delta)}))
