#!/usr/bin/python3
"""Reference translations from scikit-image's phase_cross_correlation (Debian python3-skimage).

Usage: skimage_phase_correlation.py MANIFEST UPSAMPLE
MANIFEST lines: "name width height fixed.raw moving.raw" (raw = little-endian float32, row-major).
Prints one line per pair: "name dx dy" with dx, dy the shift that lays moving on fixed
(scikit-image returns (row, col) = (dy, dx) in the same sense: fixed(x) ~ moving(x - shift)).
Exit code 3 when numpy or scikit-image is missing.
"""
import sys

try:
    import numpy as np
    from skimage.registration import phase_cross_correlation
except ImportError as e:  # pragma: no cover - reported to the test
    sys.stderr.write(f"cannot import scikit-image: {e}\n")
    sys.exit(3)


def main():
    manifest, upsample = sys.argv[1], float(sys.argv[2])
    with open(manifest) as f:
        for line in f:
            if not line.strip():
                continue
            name, w, h, fixed_path, moving_path = line.split()
            shape = (int(h), int(w))
            fixed = np.fromfile(fixed_path, dtype="<f4").reshape(shape)
            moving = np.fromfile(moving_path, dtype="<f4").reshape(shape)
            shift, _, _ = phase_cross_correlation(fixed, moving, upsample_factor=upsample)
            print(f"{name} {shift[1]:.6f} {shift[0]:.6f}")


if __name__ == "__main__":
    main()
