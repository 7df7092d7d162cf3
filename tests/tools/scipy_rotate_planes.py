#!/usr/bin/python3
"""Rotates a stack of planes with scipy.ndimage.rotate, as an outside reference for the midline tests.

Usage: scipy_rotate_planes.py INPUT.f32 PLANES HEIGHT WIDTH ANGLE OUTPUT.f32

INPUT.f32 holds PLANES × HEIGHT × WIDTH little-endian float32 values (row-major, row 0 at the top). Each plane
is rotated by ANGLE degrees with scipy.ndimage.rotate(axes=(1, 0), reshape=False, order=1, mode='constant',
cval=0) and written to OUTPUT.f32 in the same layout. On standard output it prints JSON with the rotation that
SciPy itself applied, measured from a probe (a small bright square to the right of the centre, rotated the same way):
{"probe_before": [x, y], "probe_after": [x, y], "centre": [x, y]} in pixel columns (x) and rows (y).
Exit code 3 when numpy or scipy is missing.
"""
import json
import sys

try:
    import numpy as np
    from scipy import ndimage
except ImportError as e:  # pragma: no cover
    print(f"missing Python package: {e}", file=sys.stderr)
    sys.exit(3)


def main():
    src, planes, height, width, angle, dst = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]), float(sys.argv[5]), sys.argv[6]
    stack = np.fromfile(src, dtype="<f4").reshape(planes, height, width)
    out = np.empty_like(stack)
    for k in range(planes):
        out[k] = ndimage.rotate(stack[k].astype(np.float64), angle, axes=(1, 0), reshape=False, order=1, mode="constant", cval=0.0)
    out.astype("<f4").tofile(dst)

    # The probe: where does SciPy carry a point right of the centre?
    probe = np.zeros((height, width))
    cy, cx = (height - 1) / 2.0, (width - 1) / 2.0
    py, px = int(round(cy)), int(round(cx)) + max(2, min(40, min(height, width) // 4))
    probe[py - 1:py + 2, px - 1:px + 2] = 1.0
    moved = ndimage.rotate(probe, angle, axes=(1, 0), reshape=False, order=1, mode="constant", cval=0.0)
    ys, xs = np.indices(moved.shape)
    total = moved.sum()
    print(json.dumps({
        "probe_before": [float(px), float(py)],
        "probe_after": [float((xs * moved).sum() / total), float((ys * moved).sum() / total)],
        "centre": [cx, cy],
    }))


if __name__ == "__main__":
    main()
