"""Reference: numpy's reading of an .npy file: its shape, how many values are NaN, and the first
point's coordinates (a[0, 0]). Usage: npy_summary.py FILE.npy (reference: numpy.load)."""
import json
import sys

import numpy as np

a = np.load(sys.argv[1])
print(json.dumps({"shape": list(a.shape), "nan": int(np.isnan(a).sum()), "x": a[0, 0].tolist()}))
