#!/usr/bin/python3
"""An OME-Zarr image read by Debian's python3-zarr (Zarr v2, numcodecs) and compared with a NIfTI volume read by nibabel.

Used by StackBuild's tests as an outside reference for `-o OUT.ome.zarr`.
Usage: zarr_check.py IMAGE.ome.zarr VOLUME.nii.gz
Prints one JSON object:
  "zarr_version", "levels" (per level: "path", "shape", "dtype", "chunks", "compressor" (numcodecs' codec_id),
  "dimension_separator", "scale", "translation", "factors" (scale over level 0's), "mean_mismatches" and
  "mean_max_difference" (against the block mean of the level before, None for level 0)),
  "level0_equals_nifti" (array_equal of level 0 with the NIfTI data transposed from (i, j, k) to (k, j, i)),
  "level0_dtype_matches", "nifti_shape", "nifti_zooms_um" (nibabel's get_zooms() × 1000, i j k order),
  "nifti_affine" (nibabel's img.affine), "stackbuild_affine" (the image's own copy), "translation_problems",
  "metadata_problems" (OME-NGFF 0.4's MUST rules for "multiscales", checked by hand below; empty when none),
  "tree_sha256" (SHA-256 of the folder's file list, hashlib; the sidecar's volume_sha256 for a folder).
Exit code 3 when zarr, nibabel or numpy is missing (the message names the Debian package).

The block mean is the one the writer documents: over each block of 1 or 2 voxels along each axis (fewer at an odd edge),
rounded half up, i.e. floor(mean + 0.5) on the level before as stored.
"""
import hashlib
import json
import os
import sys

try:
    import numpy as np
    import zarr
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-zarr", file=sys.stderr)
    sys.exit(3)
try:
    import nibabel as nib
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)

# OME-NGFF 0.4, "axes" metadata: the units the specification lists for space axes.
SPACE_UNITS = {'angstrom', 'attometer', 'centimeter', 'decimeter', 'exameter', 'femtometer', 'foot', 'gigameter',
               'hectometer', 'inch', 'kilometer', 'megameter', 'meter', 'micrometer', 'mile', 'millimeter', 'nanometer',
               'parsec', 'petameter', 'picometer', 'terameter', 'yard', 'yoctometer', 'yottameter', 'zeptometer',
               'zettameter'}


def metadata_problems(group):
    """OME-NGFF 0.4, section "multiscales" metadata, its MUST rules (and "axes" and "coordinateTransformations")."""
    p = []
    ms = group.attrs.get("multiscales")
    if not isinstance(ms, list) or not ms:
        return ["no 'multiscales' list in the group attributes"]
    m = ms[0]
    if m.get("version") != "0.4":
        p.append(f"version is {m.get('version')!r}, not '0.4'")
    axes = m.get("axes")
    if not isinstance(axes, list) or not 2 <= len(axes) <= 5:
        return p + ["'axes' is not a list of 2 to 5 entries"]
    names = [a.get("name") for a in axes]
    if None in names or len(set(names)) != len(names):
        p.append("axis names missing or not unique")
    types = [a.get("type") for a in axes]
    if types.count("space") not in (2, 3):
        p.append("not 2 or 3 axes of type space")
    order = {"time": 0, "channel": 1, "space": 2}
    ranks = [order.get(t, 1) for t in types]
    if ranks != sorted(ranks):
        p.append("axes not ordered time, channel, space")
    for a in axes:
        if a.get("type") == "space" and "unit" in a and a["unit"] not in SPACE_UNITS:
            p.append(f"unit {a['unit']!r} is not a UDUNITS-2 length unit the specification lists")
    datasets = m.get("datasets")
    if not isinstance(datasets, list) or not datasets:
        return p + ["no 'datasets'"]
    sizes = []
    for d in datasets:
        path = d.get("path")
        if not isinstance(path, str):
            p.append("a dataset has no 'path'")
            continue
        try:
            arr = group[path]
        except KeyError:
            p.append(f"dataset path {path!r} is not an array in the group")
            continue
        if arr.ndim != len(axes):
            p.append(f"array {path} has {arr.ndim} dimensions, axes say {len(axes)}")
        sizes.append(int(np.prod(arr.shape)))
        ts = d.get("coordinateTransformations")
        if not isinstance(ts, list) or not ts:
            p.append(f"dataset {path} has no coordinateTransformations")
            continue
        kinds = [t.get("type") for t in ts]
        if any(k not in ("scale", "translation") for k in kinds):
            p.append(f"dataset {path}: a transformation other than scale or translation")
        if kinds.count("scale") != 1 or kinds[0] != "scale":
            p.append(f"dataset {path}: not exactly one scale, listed first")
        if kinds.count("translation") > 1:
            p.append(f"dataset {path}: more than one translation")
        for t in ts:
            v = t.get(t.get("type"))
            if not isinstance(v, list) or len(v) != len(axes):
                p.append(f"dataset {path}: {t.get('type')} vector is not of length {len(axes)}")
    if sizes != sorted(sizes, reverse=True):
        p.append("datasets are not ordered from the largest array to the smallest")
    return p


def block_mean(a, f):
    """Mean over blocks of f = (fz, fy, fx) voxels, edge blocks over the voxels present, rounded half up."""
    out_shape = tuple((n + k - 1) // k for n, k in zip(a.shape, f))
    sums = np.zeros(out_shape, dtype=np.int64)
    counts = np.zeros(out_shape, dtype=np.int64)
    a = a.astype(np.int64)
    for dz in range(f[0]):
        for dy in range(f[1]):
            for dx in range(f[2]):
                part = a[dz::f[0], dy::f[1], dx::f[2]]
                sums[:part.shape[0], :part.shape[1], :part.shape[2]] += part
                counts[:part.shape[0], :part.shape[1], :part.shape[2]] += 1
    return np.floor(sums / counts + 0.5).astype(np.int64)


def tree_sha256(folder):
    lines = []
    for root, _, files in os.walk(folder):
        for name in files:
            full = os.path.join(root, name)
            rel = os.path.relpath(full, folder).replace(os.sep, "/")
            with open(full, "rb") as fh:
                lines.append((rel.encode("utf-8"), f"{hashlib.sha256(fh.read()).hexdigest()}  {rel}\n"))
    lines.sort(key=lambda t: t[0])
    return hashlib.sha256("".join(t[1] for t in lines).encode("utf-8")).hexdigest()


zarr_path, nifti_path = sys.argv[1], sys.argv[2]
group = zarr.open_group(zarr_path, mode="r")
m = group.attrs["multiscales"][0]
img = nib.load(nifti_path)
nifti = np.asanyarray(img.dataobj)

levels = []
previous = None
scale0 = None
translation_problems = []
for d in m["datasets"]:
    arr = group[d["path"]]
    data = arr[:]
    ts = {t["type"]: t for t in d["coordinateTransformations"]}
    scale = ts["scale"]["scale"]
    translation = ts.get("translation", {}).get("translation", [0.0] * len(scale))
    if scale0 is None:
        scale0 = scale
    factors = [int(round(s / s0)) for s, s0 in zip(scale, scale0)]
    # The centre of voxel 0 of a level averaging f level-0 voxels lies at the mean of their centres: (f - 1) / 2 voxels of
    # level 0 after level 0's own translation (common practice for pyramids of block means; stated from the geometry).
    for axis, (f, s0, t) in enumerate(zip(factors, scale0, translation)):
        expected = levels[0]["translation"][axis] + (f - 1) / 2 * s0 if levels else t
        if abs(t - expected) > 1e-9 * max(1.0, abs(expected)):
            translation_problems.append(f"level {d['path']} axis {axis}: translation {t}, expected {expected}")
    entry = {
        "path": d["path"], "shape": list(arr.shape), "dtype": str(arr.dtype), "chunks": list(arr.chunks),
        "compressor": arr.compressor.codec_id if arr.compressor is not None else None,
        "dimension_separator": getattr(arr, "_dimension_separator", None),
        "scale": scale, "translation": translation, "factors": factors,
        "mean_mismatches": None, "mean_max_difference": None,
    }
    if previous is not None:
        prev_data, prev_factors = previous
        step = tuple(f // pf for f, pf in zip(factors, prev_factors))
        expected = block_mean(prev_data, step)
        if expected.shape != data.shape:
            entry["mean_mismatches"] = -1
        else:
            diff = np.abs(expected - data.astype(np.int64))
            entry["mean_mismatches"] = int((diff != 0).sum())
            entry["mean_max_difference"] = int(diff.max())
    levels.append(entry)
    previous = (data, factors)

level0 = group[m["datasets"][0]["path"]][:]
own = group.attrs.get("stackbuild", {})
print(json.dumps({
    "zarr_version": zarr.__version__,
    "levels": levels,
    "level0_equals_nifti": bool(level0.shape == nifti.shape[::-1] and np.array_equal(level0, nifti.transpose(2, 1, 0))),
    "level0_dtype_matches": str(level0.dtype) == str(nifti.dtype),
    "nifti_shape": [int(n) for n in nifti.shape],
    "nifti_zooms_um": [float(z) * 1000 for z in img.header.get_zooms()[:3]],
    "nifti_affine": img.affine.tolist(),
    "stackbuild_affine": own.get("affine"),
    "axis_units": [a.get("unit") for a in m["axes"]],
    "axis_names": [a.get("name") for a in m["axes"]],
    "translation_problems": translation_problems,
    "metadata_problems": metadata_problems(group),
    "tree_sha256": tree_sha256(zarr_path),
}))
