#!/usr/bin/python3
"""Where two volumes' grids lie in the world, as nibabel (Debian python3-nibabel) reads their affines.

Used by StackBuild's tests as an outside reference for `stackbuild apply --output-pixel-size`.
Usage: nibabel_grid_corners.py VOLUME.nii.gz [VOLUME.nii.gz ...]
Prints a JSON list with one object per volume: "shape", "zooms" (nibabel's header.get_zooms(), mm), and the world
positions (mm, nibabel.affines.apply_affine on img.affine) of the outer corner of voxel (0, 0, 0)
("first_corner", voxel (-0.5, -0.5, 0)) and of the far corner of the plane ("far_corner", voxel (nx - 0.5, ny - 0.5, 0)).
Exit code 3 when nibabel or numpy is missing (the message names the Debian package).
"""
import json
import sys

try:
    import numpy as np
    import nibabel as nib
    from nibabel.affines import apply_affine
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)

out = []
for path in sys.argv[1:]:
    img = nib.load(path)
    nx, ny = img.shape[0], img.shape[1]
    corners = apply_affine(img.affine, np.array([[-0.5, -0.5, 0.0], [nx - 0.5, ny - 0.5, 0.0]]))
    out.append({
        "shape": [int(n) for n in img.shape[:3]],
        "zooms": [float(z) for z in img.header.get_zooms()[:3]],
        "first_corner": [float(v) for v in corners[0]],
        "far_corner": [float(v) for v in corners[1]],
    })
print(json.dumps(out))
