"""Reference: numpy reads an .npy of shape (n, k, m) and gives each configuration's centroid size."""
import json, sys
import numpy as np
a = np.load(sys.argv[1])
c = a - a.mean(axis=1, keepdims=True)
print(json.dumps({"shape": list(a.shape), "centroid_sizes": np.sqrt((c ** 2).sum(axis=(1, 2))).tolist()}))
