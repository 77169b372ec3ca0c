"""Reference: nibabel's reading of one NIfTI file — sum of get_fdata() (scaled values) and affine."""
import json, sys
import nibabel as nib
import numpy as np
img = nib.load(sys.argv[1])
print(json.dumps({"sum": float(np.nansum(img.get_fdata(dtype=np.float64))), "affine": img.affine.tolist()}))
