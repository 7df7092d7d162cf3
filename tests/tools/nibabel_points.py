#!/usr/bin/python3
"""World coordinates of voxel positions as nibabel (Debian python3-nibabel) computes them from a NIfTI file's affine.

Used by StackBuild's tests as an outside reference for `stackbuild points`.
Usage: nibabel_points.py VOLUME.nii.gz POINTS.csv   (POINTS.csv has columns i, j, k)
Prints a JSON list of [x, y, z] (mm), one per row, from nibabel.affines.apply_affine(img.affine, (i, j, k)).
Exit code 3 when nibabel or numpy is missing (the message names the Debian package).
"""
import csv
import json
import sys

try:
    import numpy as np
    import nibabel as nib
    from nibabel.affines import apply_affine
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)

img = nib.load(sys.argv[1])
with open(sys.argv[2], newline="") as f:
    rows = list(csv.DictReader(f))
ijk = np.array([[float(r["i"]), float(r["j"]), float(r["k"])] for r in rows])
print(json.dumps([[float(v) for v in p] for p in apply_affine(img.affine, ijk)]))
