#!/usr/bin/python3
"""Describe NIfTI files as nibabel (Debian python3-nibabel) reads them, as JSON on stdout.

Used by StackBuild's tests as an outside reference: StackBuild writes, nibabel reads.
Usage: nibabel_check.py FILE [FILE ...]
Exit code 3 when nibabel or numpy is missing (the message names the Debian package).
"""
import json
import sys

try:
    import numpy as np
    import nibabel as nib
except ImportError as e:  # the C# test turns exit code 3 into a failure naming the package
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)


def rows(m):
    return [[float(v) for v in r] for r in np.asarray(m)]


def describe(path):
    img = nib.load(path)
    h = img.header
    raw = np.asanyarray(img.dataobj)
    # nibabel moves scaling and data offset from the loaded header into the array proxy
    slope, inter = float(img.dataobj.slope), float(img.dataobj.inter)
    out = {
        "file": path,
        "nibabel": nib.__version__,
        "shape": [int(n) for n in img.shape],
        "zooms": [float(z) for z in h.get_zooms()],
        "datatype": int(h["datatype"]),
        "bitpix": int(h["bitpix"]),
        "endianness": h.endianness,
        "vox_offset": int(img.dataobj.offset),
        "axcodes": "".join(nib.aff2axcodes(img.affine)),
        "affine": rows(img.affine),
        "qform": rows(img.get_qform()),
        "sform": rows(img.get_sform()),
        "qform_code": int(h["qform_code"]),
        "sform_code": int(h["sform_code"]),
        "qfac": float(h["pixdim"][0]),
        "qform_sform_max_difference": float(np.max(np.abs(img.get_qform() - img.get_sform()))),
        "units": list(h.get_xyzt_units()),
        "scl_slope": slope,
        "scl_inter": inter,
        "cal_min": float(h["cal_min"]),
        "cal_max": float(h["cal_max"]),
        "descrip": h["descrip"].tobytes().split(b"\0")[0].decode("ascii", "replace"),
    }
    if raw.dtype.names:  # rgb24 comes back as a structured array with fields R, G, B
        rgb = np.stack([raw[name].ravel(order="F") for name in raw.dtype.names], axis=-1)
        out["channel_sums"] = [int(v) for v in rgb.sum(axis=0, dtype=np.int64)]
        out["rgb_at"] = {str(i): [int(v) for v in rgb[i]] for i in sample_indices(len(rgb))}
    else:
        data = img.get_fdata(dtype=np.float64).ravel(order="F")
        finite = data[np.isfinite(data)]
        out["sum"] = float(finite.sum())
        out["sum_of_squares"] = float((finite * finite).sum())
        out["nan_count"] = int(np.isnan(data).sum())
        out["values_at"] = {str(i): float(data[i]) for i in sample_indices(len(data))}
    return out


def sample_indices(n):
    return sorted({0, 1, n // 7, n // 3, n // 2, (2 * n) // 3, n - 2, n - 1} & set(range(n)))


if __name__ == "__main__":
    print(json.dumps([describe(p) for p in sys.argv[1:]]))
