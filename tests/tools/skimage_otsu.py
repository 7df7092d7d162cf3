#!/usr/bin/python3
"""Otsu threshold from scikit-image (Debian python3-skimage) of a raw image.

Usage: skimage_otsu.py RAW COUNT   (RAW = COUNT little-endian float32 values)
Prints the threshold. Exit code 3 when numpy or scikit-image is missing.
"""
import sys

try:
    import numpy as np
    from skimage.filters import threshold_otsu
except ImportError as e:  # pragma: no cover - reported to the test
    sys.stderr.write(f"cannot import scikit-image: {e}\n")
    sys.exit(3)

values = np.fromfile(sys.argv[1], dtype="<f4", count=int(sys.argv[2]))
print(f"{threshold_otsu(values, nbins=256):.8f}")
