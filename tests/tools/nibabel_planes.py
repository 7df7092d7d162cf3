#!/usr/bin/python3
"""Reference planes for StackBuild's viewer tests, cut with nibabel (Debian python3-nibabel) as plain array slices.

Usage: nibabel_planes.py VOLUME.nii.gz I J K LOW HIGH
Loads the volume with nibabel, takes the three voxel-axis planes through voxel (I, J, K) as array slices of
get_fdata() and maps them to 8-bit grey with the window LOW..HIGH: round((v - LOW) * (255 / (HIGH - LOW))), half
away from zero, clipped to 0..255. Image rows run down, columns right, as the viewer shows them:
  section: right = i, down = j  (data[:, :, K].T)
  ik:      right = i, down = k  (data[:, J, :].T)
  jk:      right = j, down = k  (data[I, :, :].T)
Prints JSON {"section": {"width", "height", "gray"}, "ik": …, "jk": …}, grey values row by row.
"""
import json
import sys

try:
    import nibabel as nib
    import numpy as np
except ImportError as e:  # exit 3: the test names the Debian package to install
    sys.stderr.write(f"{e}\n")
    sys.exit(3)


def to8(plane, low, high):
    v = (plane - low) * (255.0 / (high - low))
    return np.clip(np.sign(v) * np.floor(np.abs(v) + 0.5), 0, 255).astype(int)


def main():
    path, i, j, k, low, high = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4]), float(sys.argv[5]), float(sys.argv[6])
    data = np.asanyarray(nib.load(path).dataobj).astype(np.float64)
    if data.ndim == 4:
        data = data[..., 0]
    planes = {"section": data[:, :, k].T, "ik": data[:, j, :].T, "jk": data[i, :, :].T}
    out = {}
    for name, plane in planes.items():
        g = to8(plane, low, high)
        out[name] = {"width": int(g.shape[1]), "height": int(g.shape[0]), "gray": g.ravel().tolist()}
    print(json.dumps(out))


if __name__ == "__main__":
    main()
