#!/usr/bin/env python3
"""Independent check of a series written by `stackbuild cut`, with nibabel, SciPy and scikit-image.

Usage: cut_check.py VOLUME SERIES_DIR NUMBER [NUMBER ...]
For each section: nibabel reads the volume plane truth.json names (volume_plane along options.axis; in-plane x along the
first remaining voxel axis, y along the second), scipy.ndimage.map_coordinates (order 1) samples it at every scan pixel
through the inverse of plane_to_image and the truth-plane-to-voxel scaling (pixel edges kept: voxel = (x + 0.5) / s - 0.5,
s = voxel size / pixel size), and the result is correlated with the PNG read by skimage.io (bright-field scans are
compared after negation). Prints one JSON object per section: number, correlation, turned_over (the correlation with
the plane's x reversed, as a wrong mounting side would give), mirrored. A tilted cut (options.tilt_degrees) is sampled
in 3D on the knife's plane as truth.json's tilt_convention defines it, and "untilted" gives the correlation with the
voxel plane instead.
"""
import json
import sys

import nibabel as nib
import numpy as np
from scipy import ndimage
from skimage import io


def main():
    volume_path, series, numbers = sys.argv[1], sys.argv[2], [int(n) for n in sys.argv[3:]]
    with open(f"{series}/truth.json", encoding="utf-8") as f:
        truth = json.load(f)
    o = truth["options"]
    img = nib.load(volume_path)
    data = np.asarray(img.dataobj, dtype=np.float64)
    axis = "ijk".index(o["axis"])
    in_plane = [a for a in range(3) if a != axis]
    zooms = img.header.get_zooms()[:3]
    pixel_mm = o["pixel_size_um"] / 1000.0
    sections = {s["number"]: s for s in truth["sections"]}
    for number in numbers:
        s = sections[number]
        tilt = o.get("tilt_degrees") or [0.0, 0.0]
        plane = np.take(data, s["volume_plane"], axis=axis)  # indexed [first in-plane axis, second]
        image = io.imread(f"{series}/{s['file']}").astype(np.float64)
        if o["bright_field"]:
            image = -image
        h, w = image.shape
        inverse = np.linalg.inv(np.array(s["plane_to_image"], dtype=np.float64))
        ys, xs = np.mgrid[0:h, 0:w].astype(np.float64)
        tx = inverse[0, 0] * xs + inverse[0, 1] * ys + inverse[0, 2]
        ty = inverse[1, 0] * xs + inverse[1, 1] * ys + inverse[1, 2]
        sx, sy = zooms[in_plane[0]] / pixel_mm, zooms[in_plane[1]] / pixel_mm
        vx, vy = (tx + 0.5) / sx - 0.5, (ty + 0.5) / sy - 0.5
        if tilt[0] != 0 or tilt[1] != 0:
            # The knife's plane (truth.json "tilt_convention"): offsets (a, b) mm from the plane's centre turned by
            # R = Rx(tx) Ry(ty) in the (first in-plane axis, second, cut axis) millimetre frame, built here from the two
            # elementary turns; sampled in 3D with the volume's axes in that order.
            tx, ty = np.radians(tilt[0]), np.radians(tilt[1])
            rx = np.array([[1, 0, 0], [0, np.cos(tx), -np.sin(tx)], [0, np.sin(tx), np.cos(tx)]])
            ry = np.array([[np.cos(ty), 0, np.sin(ty)], [0, 1, 0], [-np.sin(ty), 0, np.cos(ty)]])
            r = rx @ ry
            stack = np.transpose(data, (in_plane[0], in_plane[1], axis))
            zx, zy, zk = zooms[in_plane[0]], zooms[in_plane[1]], zooms[axis]
            cx, cy = (stack.shape[0] - 1) / 2.0, (stack.shape[1] - 1) / 2.0
            a, b = (vx - cx) * zx, (vy - cy) * zy
            px = cx + (r[0, 0] * a + r[0, 1] * b) / zx
            py = cy + (r[1, 0] * a + r[1, 1] * b) / zy
            pk = s["volume_plane"] + (r[2, 0] * a + r[2, 1] * b) / zk
            sampled = ndimage.map_coordinates(stack, [px, py, pk], order=1, mode="constant", cval=float(data.min()))
            # The same image's flat plane: a tilted cut must differ from it, or the check proves little.
            flat = ndimage.map_coordinates(plane, [vx, vy], order=1, mode="constant", cval=float(plane.min()))
            untilted = float(np.corrcoef(flat.ravel(), image.ravel())[0, 1])
            correlation = float(np.corrcoef(sampled.ravel(), image.ravel())[0, 1])
            print(json.dumps({"number": number, "correlation": correlation, "untilted": untilted, "mirrored": s["mirrored"]}))
            continue
        sampled = ndimage.map_coordinates(plane, [vx, vy], order=1, mode="constant", cval=float(plane.min()))
        correlation = float(np.corrcoef(sampled.ravel(), image.ravel())[0, 1])
        # The same with the plane turned over (its x reversed): what a map that got the mounting side wrong would give.
        flipped = ndimage.map_coordinates(plane[::-1, :], [vx, vy], order=1, mode="constant", cval=float(plane.min()))
        other = float(np.corrcoef(flipped.ravel(), image.ravel())[0, 1])
        print(json.dumps({"number": number, "correlation": correlation, "turned_over": other, "mirrored": s["mirrored"]}))


if __name__ == "__main__":
    main()
