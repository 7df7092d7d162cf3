#!/usr/bin/env python3
"""Independent check of the demo's plane_to_image convention with scipy and scikit-image.

Usage: demo_check_transform.py DEMO_DIR PLANES_DIR NUMBER [NUMBER ...]
PLANES_DIR holds plane_NNN.f32: truth plane of section NNN, float32 little-endian, row-major (height x width).
For each section, resamples the truth plane into the scanned image's frame with
scipy.ndimage.map_coordinates (order 1) through the inverse of truth.json's plane_to_image, applies
value = 255 * (offset - gain * truth), and compares with the PNG read by skimage.io.
Prints one JSON object per section: number, correlation, residual_sd. Exit code 0 when all were computed.
"""
import json
import sys

import numpy as np
from scipy import ndimage
from skimage import io


def main():
    demo_dir, planes_dir, numbers = sys.argv[1], sys.argv[2], [int(n) for n in sys.argv[3:]]
    with open(f"{demo_dir}/truth.json", encoding="utf-8") as f:
        truth = json.load(f)
    width, height = truth["options"]["width"], truth["options"]["height"]
    sections = {s["number"]: s for s in truth["sections"]}
    for number in numbers:
        s = sections[number]
        plane = np.fromfile(f"{planes_dir}/plane_{number:03d}.f32", dtype="<f4").reshape(height, width)
        image = io.imread(f"{demo_dir}/{s['file']}").astype(np.float64)
        m = np.array(s["plane_to_image"], dtype=np.float64)
        inverse = np.linalg.inv(m)
        ys, xs = np.mgrid[0:height, 0:width].astype(np.float64)
        qx = inverse[0, 0] * xs + inverse[0, 1] * ys + inverse[0, 2]
        qy = inverse[1, 0] * xs + inverse[1, 1] * ys + inverse[1, 2]
        # map_coordinates indexes (row, column) = (y, x); pixel centres at integers, as in StackBuild.
        sampled = ndimage.map_coordinates(plane.astype(np.float64), [qy, qx], order=1, mode="constant", cval=0.0)
        expected = 255.0 * (s["offset"] - s["gain"] * sampled)
        correlation = float(np.corrcoef(expected.ravel(), image.ravel())[0, 1])
        residual_sd = float(np.std(image - expected))
        print(json.dumps({"number": number, "correlation": correlation, "residual_sd": residual_sd}))


if __name__ == "__main__":
    main()
