#!/usr/bin/python3
"""Write small NIfTI-1 files with nibabel (Debian python3-nibabel) for StackBuild's reader to check against.

Usage: nibabel_write.py FOLDER
Prints a JSON list, one entry per file: its name, how it was written, and the values nibabel reads back
(voxel values in file order, scaled; for RGB the bytes). Exit code 3 when nibabel or numpy is missing.
"""
import json
import os
import sys

try:
    import numpy as np
    import nibabel as nib
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)


def rows(m):
    return [[float(v) for v in r] for r in np.asarray(m)]


def oblique(zooms, shift):
    """A rigid affine turned 20° about z and 10° about x, with voxel sizes `zooms`."""
    a, b = np.deg2rad(20), np.deg2rad(10)
    rz = np.array([[np.cos(a), -np.sin(a), 0], [np.sin(a), np.cos(a), 0], [0, 0, 1]])
    rx = np.array([[1, 0, 0], [0, np.cos(b), -np.sin(b)], [0, np.sin(b), np.cos(b)]])
    m = np.eye(4)
    m[:3, :3] = rz @ rx @ np.diag(zooms)
    m[:3, 3] = shift
    return m


def ramp(shape):
    """Deterministic values: a different number in every voxel, i fastest."""
    n = int(np.prod(shape))
    return np.arange(n, dtype=np.float64).reshape(shape, order="F")


def main(folder):
    shape = (6, 5, 4)
    lps = np.diag([-0.5, -0.5, 1.0, 1.0])  # left-handed: i → L, j → P, k → S
    lps[:3, 3] = [10, 20, -5]
    cases = []

    def save(name, data, affine, dtype, endian="<", units="mm", scale=None, rgb=False, qform_only=False):
        hdr = nib.Nifti1Header(endianness=endian)
        hdr.set_data_dtype(dtype)
        hdr.set_xyzt_units(units)
        img = nib.Nifti1Image(data, affine, hdr)
        if scale is not None:
            img.header.set_slope_inter(*scale)
        if qform_only:  # geometry only in the quaternion (nifti1.h method 2)
            img.set_qform(affine, code=1)
            img.set_sform(None, code=0)
        path = os.path.join(folder, name)
        nib.save(img, path)
        back = nib.load(path)
        entry = {
            "file": name,
            "nibabel": nib.__version__,
            "shape": [int(n) for n in back.shape],
            "datatype": int(back.header["datatype"]),
            "big_endian": back.header.endianness == ">",
            "units": units,
            "affine": rows(back.affine),  # in the file's unit, as stored
            "qform_code": int(back.header["qform_code"]),
            "sform_code": int(back.header["sform_code"]),
            "scl_slope": float(back.dataobj.slope),
            "scl_inter": float(back.dataobj.inter),
        }
        raw = np.asanyarray(back.dataobj)
        if rgb:
            entry["rgb"] = [int(v) for v in np.stack([raw[c].ravel(order="F") for c in "RGB"], axis=-1).ravel()]
        else:
            entry["values"] = [float(v) for v in back.get_fdata(dtype=np.float64).ravel(order="F")]
            if scale is None:  # what was handed to nibabel, before it was stored in the file's type
                entry["intended"] = [float(v) for v in np.asarray(data, dtype=np.float64).ravel(order="F")]
        cases.append(entry)

    r = ramp(shape)
    save("int8_lps.nii", (r - 60).astype(np.int8), lps, np.int8)
    save("int32_oblique.nii.gz", (r * 1_000_003 - 50_000_000).astype(np.int32), oblique([0.3, 0.3, 1.2], [5, -7, 9]), np.int32,
         qform_only=True)
    save("float64_big.nii", np.sin(r / 7.0) * 1e3, oblique([2, 2, 2], [0, 0, 0]), np.float64, endian=">")
    # Float data stored as big-endian int16: nibabel chooses scl_slope/scl_inter itself.
    save("int16_big_scaled.nii", r / 9.0 - 3.3, lps, np.int16, endian=">")
    # Explicit scaling written by nibabel, with the spatial unit micrometres (pixdim and affine in µm).
    save("uint16_micron_slope.nii.gz", (r * 3).astype(np.uint16), np.diag([20.0, 20.0, 50.0, 1.0]), np.uint16,
         units="micron", scale=(0.25, 10.0))
    four = np.stack([r, -r, r * 0.5], axis=-1).astype(np.float32)
    save("float32_4d.nii", four, lps, np.float32)
    rgb_dtype = np.dtype([("R", "u1"), ("G", "u1"), ("B", "u1")])
    rgb = np.zeros(shape, dtype=rgb_dtype)
    rgb["R"] = (r * 2) % 256
    rgb["G"] = (r * 5 + 7) % 256
    rgb["B"] = 255 - r
    save("rgb24.nii", rgb, lps, rgb_dtype, rgb=True)
    print(json.dumps(cases))


if __name__ == "__main__":
    main(sys.argv[1])
