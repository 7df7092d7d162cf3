#!/usr/bin/python3
"""Reference values for StackBuild's template tests (Debian python3-nibabel, python3-scipy, python3-numpy).

scipy_template.py slice NIFTI AXIS K PIXEL_MM OUTPUT
    Reads NIFTI with nibabel, takes the planes across voxel axis AXIS (i, j or k; in-plane axes (i, j), (i, k) or
    (j, k) in that order), and samples the plane at fractional index K on square pixels of PIXEL_MM, keeping pixel
    edges: plane coordinate = (pixel + 0.5) * s - 0.5 with s = PIXEL_MM / voxel size along that axis (voxel sizes =
    column norms of the affine); width = round(n / s). Where s > 1 the volume is first smoothed along that in-plane
    axis with scipy.ndimage.gaussian_filter(sigma=(s - 1) / 2, mode='nearest') (the anti-aliasing of
    skimage.transform.resize). Values from scipy.ndimage.map_coordinates(order=1, mode='nearest'); pixels outside
    the voxel cells ([-0.5, n - 0.5]) are 0. Writes raw float32 (x fastest) to
    OUTPUT and prints {"width": W, "height": H} as JSON.

scipy_template.py mi A.raw B.raw COUNT BINS LOW_A HIGH_A LOW_B HIGH_B
    Mutual information of two float32 arrays of COUNT values with numpy.histogram2d: A is binned hard
    (floor((a - low) / (high - low) * BINS), clipped), B is placed at u = clip((b - low) / (high - low), 0, 1) * (BINS - 1)
    and shared linearly between bins floor(u) and floor(u) + 1 (weights). Prints MI (nats) and normalised MI
    (H(A) + H(B)) / H(A, B) as JSON.
"""
import json
import sys

import numpy as np


def slice_mode(path, axis, k, pixel, output):
    import nibabel as nib
    from scipy import ndimage
    img = nib.load(path)
    data = np.asarray(img.dataobj, dtype=np.float64)
    if data.ndim > 3:
        data = data[..., 0]
    sizes = np.linalg.norm(img.affine[:3, :3], axis=0)
    order = {"k": (0, 1, 2), "j": (0, 2, 1), "i": (1, 2, 0)}[axis]
    n = [data.shape[a] for a in order]
    s = [pixel / sizes[order[0]], pixel / sizes[order[1]]]
    w, h = int(round(n[0] / s[0])), int(round(n[1] / s[1]))
    sigma = [0.0, 0.0, 0.0]
    sigma[order[0]] = max(0.0, (s[0] - 1) / 2)
    sigma[order[1]] = max(0.0, (s[1] - 1) / 2)
    if any(v > 0 for v in sigma):
        data = ndimage.gaussian_filter(data, sigma=sigma, mode="nearest")
    px = (np.arange(w) + 0.5) * s[0] - 0.5
    py = (np.arange(h) + 0.5) * s[1] - 0.5
    yy, xx = np.meshgrid(py, px, indexing="ij")
    coords = np.zeros((3, h, w))
    coords[order[0]] = xx
    coords[order[1]] = yy
    coords[order[2]] = k
    values = ndimage.map_coordinates(data, coords.reshape(3, -1), order=1, mode="nearest").reshape(h, w)
    inside = (xx >= -0.5) & (xx <= n[0] - 0.5) & (yy >= -0.5) & (yy <= n[1] - 0.5)
    values[~inside] = 0
    values.astype("<f4").tofile(output)
    print(json.dumps({"width": w, "height": h}))


def mi_mode(a_path, b_path, count, bins, la, ha, lb, hb):
    a = np.fromfile(a_path, dtype="<f4").astype(np.float64)
    b = np.fromfile(b_path, dtype="<f4").astype(np.float64)
    assert a.size == count and b.size == count
    abin = np.clip(np.floor((a - la) / (ha - la) * bins), 0, bins - 1)
    u = np.clip((b - lb) / (hb - lb), 0, 1) * (bins - 1)
    b0 = np.floor(u)
    f = u - b0
    upper = np.minimum(b0 + 1, bins - 1)
    edges = np.arange(bins + 1) - 0.5
    joint, _, _ = np.histogram2d(abin, b0, bins=[edges, edges], weights=1 - f)
    joint2, _, _ = np.histogram2d(abin, upper, bins=[edges, edges], weights=f)
    p = (joint + joint2) / count
    pa, pb = p.sum(axis=1), p.sum(axis=0)

    def entropy(q):
        q = q[q > 0]
        return float(-(q * np.log(q)).sum())

    h_a, h_b, h_ab = entropy(pa), entropy(pb), entropy(p.ravel())
    print(json.dumps({"mi": h_a + h_b - h_ab, "nmi": (h_a + h_b) / h_ab}))


if __name__ == "__main__":
    try:
        import numpy  # noqa: F401
    except ImportError as e:
        print(str(e), file=sys.stderr)
        sys.exit(3)
    if sys.argv[1] == "slice":
        slice_mode(sys.argv[2], sys.argv[3], float(sys.argv[4]), float(sys.argv[5]), sys.argv[6])
    else:
        mi_mode(sys.argv[2], sys.argv[3], int(sys.argv[4]), int(sys.argv[5]), *map(float, sys.argv[6:10]))
