"""Reads mesh files back with trimesh (no processing, so nothing is merged or dropped).

Usage: prep_trimesh.py FILE...
Prints JSON: for each file (by its name) its vertex and face counts, area, volume and whether trimesh finds it
watertight.
"""
import json
import os
import sys

import trimesh


def main():
    out = {}
    for path in sys.argv[1:]:
        m = trimesh.load(path, process=False, force="mesh")
        out[os.path.basename(path)] = {
            "vertices": int(len(m.vertices)),
            "faces": int(len(m.faces)),
            "area": float(m.area),
            "volume": float(m.volume),
            "watertight": bool(m.is_watertight),
        }
    print(json.dumps(out))


main()
