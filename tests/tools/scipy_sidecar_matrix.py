#!/usr/bin/env python3
"""Checks a build's sidecar matrices against its volume with reference libraries only.

For each aligned section: read the scanned PNG (scikit-image), resample it into the output plane through the
inverse of the sidecar `matrix` with scipy.ndimage.map_coordinates (order 1), read that plane of the NIfTI
volume with nibabel, and report the mean absolute difference over voxels the section covers, at the true
position and at the best of the 8 one-voxel offsets around it (a convention error shows as a better offset).

Usage: scipy_sidecar_matrix.py VOLUME.nii.gz SIDECAR.json SERIES_FOLDER N_SECTIONS
Prints JSON: [{"number", "mad", "best_offset", "best_mad"}...]
"""
import json
import os
import sys

import nibabel as nib
import numpy as np
from scipy import ndimage
from skimage import io

volume_path, sidecar_path, folder, count = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])
data = np.asanyarray(nib.load(volume_path).dataobj).astype(np.float64)  # (i, j, k)
sidecar = json.load(open(sidecar_path))
sections = [s for s in sidecar["sections"] if s["status"] == "aligned"][:count]
out = []
for s in sections:
    image = io.imread(os.path.join(folder, s["file"])).astype(np.float64)  # rows = y, columns = x
    m = np.array(s["matrix"])
    inv = np.linalg.inv(m)
    ni, nj = data.shape[0], data.shape[1]
    ii, jj = np.meshgrid(np.arange(ni), np.arange(nj), indexing="ij")
    x = inv[0, 0] * ii + inv[0, 1] * jj + inv[0, 2]
    y = inv[1, 0] * ii + inv[1, 1] * jj + inv[1, 2]
    h, w = image.shape
    inside = (x >= 0) & (x <= w - 1) & (y >= 0) & (y <= h - 1)
    inside[:2, :] = inside[-2:, :] = False
    inside[:, :2] = inside[:, -2:] = False
    expected = ndimage.map_coordinates(image, [y, x], order=1, mode="nearest")
    plane = data[:, :, s["z_index"]]
    results = {}
    for di in (-1, 0, 1):
        for dj in (-1, 0, 1):
            shifted = np.roll(np.roll(plane, -di, axis=0), -dj, axis=1)
            results[(di, dj)] = float(np.mean(np.abs(shifted[inside] - expected[inside])))
    best = min(results, key=results.get)
    out.append({"number": s["number"], "mad": results[(0, 0)], "best_offset": list(best), "best_mad": results[best]})
print(json.dumps(out))
