#!/usr/bin/python3
"""Reference reslice for StackBuild's tests, computed with SciPy (Debian python3-scipy).

Usage: scipy_reslice.py REQUEST.json
The request names a raw float32 volume (NIfTI index order: i fastest, then j, then k), its 4x4 voxel-to-world
affine, and a plane in world mm (centre, right and down unit vectors, width, height, pixel size). The plane's
pixel (x, y) lies at centre + (x - (W-1)/2)*pixel*right + (y - (H-1)/2)*pixel*down (StackBuild's convention,
restated here independently of the C# code). Voxel positions come from numpy.linalg.inv(affine); values from
scipy.ndimage.map_coordinates(order=1, mode='nearest'); pixels whose voxel position lies outside the voxel cells
([-0.5, n-0.5] on any axis) get the fill value. Writes the plane as raw float32 (row-major, x fastest) to the
request's "output" path and prints the volume's 0.5th and 99.5th percentiles (numpy.percentile) as JSON.
"""
import json
import sys

import numpy as np
from scipy import ndimage


def main():
    with open(sys.argv[1]) as f:
        req = json.load(f)
    nx, ny, nz = req["dims"]
    data = np.fromfile(req["volume"], dtype="<f4")
    if data.size != nx * ny * nz:
        raise SystemExit(f"volume has {data.size} values, expected {nx * ny * nz}")
    vol = data.reshape((nz, ny, nx))  # C order: k slowest, i fastest
    affine = np.array(req["affine"], dtype=float)
    centre = np.array(req["centre"], dtype=float)
    right = np.array(req["right"], dtype=float)
    down = np.array(req["down"], dtype=float)
    w, h, pixel = int(req["width"]), int(req["height"]), float(req["pixel"])
    xs = (np.arange(w) - (w - 1) / 2.0) * pixel
    ys = (np.arange(h) - (h - 1) / 2.0) * pixel
    yy, xx = np.meshgrid(ys, xs, indexing="ij")
    world = centre[None, None, :] + xx[..., None] * right + yy[..., None] * down
    homogeneous = np.concatenate([world, np.ones((h, w, 1))], axis=-1)
    voxel = homogeneous @ np.linalg.inv(affine).T  # (h, w, 4): i, j, k, 1
    i, j, k = voxel[..., 0], voxel[..., 1], voxel[..., 2]
    inside = ((i >= -0.5) & (i <= nx - 0.5) & (j >= -0.5) & (j <= ny - 0.5) & (k >= -0.5) & (k <= nz - 0.5))
    order = 0 if req.get("nearest") else 1
    if order == 0:
        # Round half up, as StackBuild documents; map_coordinates' own rounding of .5 is not specified.
        i, j, k = (np.floor(np.clip(c, 0, n - 1) + 0.5) for c, n in ((i, nx), (j, ny), (k, nz)))
    values = ndimage.map_coordinates(vol.astype(np.float64), [k.ravel(), j.ravel(), i.ravel()],
                                     order=order, mode="nearest").reshape(h, w)
    values = np.where(inside, values, float(req["fill"]))
    values.astype("<f4").tofile(req["output"])
    low, high = np.percentile(data[np.isfinite(data)], [0.5, 99.5])
    print(json.dumps({"low": float(low), "high": float(high), "inside": int(inside.sum())}))


if __name__ == "__main__":
    main()
