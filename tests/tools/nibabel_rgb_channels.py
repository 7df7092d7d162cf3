#!/usr/bin/python3
"""An RGB24 volume against one volume per channel, as nibabel (Debian python3-nibabel) reads them.

Used by StackBuild's tests as an outside reference for `stackbuild apply --channels rgb` and `--channels split`.
Usage: nibabel_rgb_channels.py RGB.nii.gz RED.nii.gz GREEN.nii.gz BLUE.nii.gz
nibabel reads NIfTI-1 datatype 128 (RGB24) as a structured dtype with fields R, G, B of uint8; its get_fdata refuses
such data, so the voxels are taken from img.dataobj, as nibabel's documentation says for structured types.
Prints a JSON list of one object: "datatype" (the header's code), "dtype" (nibabel's data dtype), "shape", "voxels", and for each
channel the count of voxels that differ from the channel's own volume ("differ_R", ...), the channel volume's dtype
("dtype_R", ...), the largest absolute difference between the affines ("affine_difference") and the channel's value range.
Exit code 3 when nibabel or numpy is missing (the message names the Debian package).
"""
import json
import sys

try:
    import numpy as np
    import nibabel as nib
except ImportError as e:
    print(f"missing Python module ({e}); install the Debian package python3-nibabel", file=sys.stderr)
    sys.exit(3)

rgb = nib.load(sys.argv[1])
data = np.asanyarray(rgb.dataobj)
out = {
    "datatype": int(rgb.header["datatype"]),
    "dtype": str(rgb.get_data_dtype()),
    "shape": [int(n) for n in data.shape],
    "voxels": int(data.size),
}
for field, path in zip("RGB", sys.argv[2:5]):
    channel = nib.load(path)
    values = np.asanyarray(channel.dataobj)
    out[f"dtype_{field}"] = str(values.dtype)
    out[f"differ_{field}"] = int(np.count_nonzero(data[field].astype(np.int64) != values.astype(np.int64)))
    out[f"range_{field}"] = [int(data[field].min()), int(data[field].max())]
    out[f"affine_difference_{field}"] = float(np.abs(channel.affine - rgb.affine).max())
print(json.dumps([out]))
