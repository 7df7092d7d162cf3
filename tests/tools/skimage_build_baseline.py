#!/usr/bin/python3
"""A whole section-series build assembled from general-purpose libraries: the baseline StackBuild's speed is measured
against (docs/benchmarks.md, `dotnet run -c Release --project tests/StackBuild.Benchmarks -- build-vs-library`).

It is what a careful user would put together with Debian's scikit-image 0.19, SciPy and nibabel, not a strawman:
every section is registered to its neighbour at any angle and both ways up, the expensive search runs at quarter size,
the translation is measured at full size to 1/20 pixel, pairs run in parallel on all the cores asked for, and the
volume is resampled once per section.

Steps
1. Read the section images of the series folder (PNG or TIFF; the section number is the last run of digits in the file
   name), in number order, as float32 gray in [0, 1] (skimage.io.imread, skimage.util.img_as_float32). Numbers with
   no file are missing sections.
2. Prepare each section twice: at quarter size (skimage.transform.rescale, anti-aliased) for the search, and at full
   size; both normalised to zero mean and unit standard deviation.
3. For each pair of consecutive present sections (the earlier one fixed), search the moving section's rotation
   exhaustively at quarter size: for each mounting (as scanned, and mirrored left-right) and each angle from 0 to 360 in
   steps of --coarse-step degrees, rotate it about the image centre (skimage.transform.rotate, bilinear), find the
   translation by phase correlation (skimage.registration.phase_cross_correlation, whole pixels), shift it there
   (scipy.ndimage.shift) and score the pair by the normalised cross-correlation of the two images. The best mounting and
   angle are refined in steps of --refine-step degrees within one coarse step on either side.
4. At the best mounting and angle, rotate the full-size section and measure the translation by phase correlation with
   upsample_factor=20 (1/20 pixel, Guizar-Sicairos et al. 2008, as scikit-image implements it).
5. Chain the pair maps (3 x 3 homogeneous matrices in pixel coordinates, x right, y down) from the middle section
   outward, so every section is mapped into the middle section's frame.
6. Render: each section resampled once into the frame of the middle section on the full canvas
   (scipy.ndimage.affine_transform, bilinear); missing sections filled by linear interpolation between the nearest
   rendered planes along the stack.
7. Write one NIfTI-1 volume (nibabel; 8- or 16-bit like the input, voxel size from --pixel-um and --spacing-um).

Usage
  skimage_build_baseline.py SERIES_FOLDER OUT.nii.gz [--pixel-um 1] [--spacing-um 1] [--jobs 2]
                            [--coarse-step 2] [--refine-step 0.25]
  skimage_build_baseline.py --time-pair FIXED.png MOVING.png [--size 512] [--repeat 7]
      times scikit-image's translation-only phase_cross_correlation (upsample_factor=20) on one pair reduced to a long
      side of --size pixels, and prints "pcc_seconds MEDIAN" (the median of --repeat runs after one unmeasured run).
Timings of the steps go to stderr. Exit code 3 when numpy, SciPy, scikit-image or nibabel is missing.
"""
import argparse
import os
import re
import sys
import time

try:
    import numpy as np
    import nibabel as nib
    from concurrent.futures import ProcessPoolExecutor
    from scipy import ndimage
    from skimage import io, transform, util
    from skimage.registration import phase_cross_correlation
except ImportError as e:  # pragma: no cover - reported to the caller
    sys.stderr.write(f"cannot import the libraries: {e}\n")
    sys.exit(3)

IMAGE_SUFFIXES = (".png", ".tif", ".tiff")


def read_series(folder):
    """Section number -> file path, for every image file whose name holds a number."""
    sections = {}
    for name in os.listdir(folder):
        if not name.lower().endswith(IMAGE_SUFFIXES):
            continue
        digits = re.findall(r"\d+", os.path.splitext(name)[0])
        if digits:
            sections[int(digits[-1])] = os.path.join(folder, name)
    return dict(sorted(sections.items()))


def read_gray(path):
    image = io.imread(path)
    if image.ndim == 3:  # colour scans: luminance
        from skimage.color import rgb2gray
        image = rgb2gray(image[..., :3])
    return util.img_as_float32(image), image.dtype


def normalised(image):
    image = image.astype(np.float32)
    return (image - image.mean()) / (image.std() + 1e-12)


def ncc(a, b):
    a = a - a.mean()
    b = b - b.mean()
    return float((a * b).sum() / (np.sqrt((a * a).sum() * (b * b).sum()) + 1e-12))


def orient(image, mirrored, angle):
    """The moving image mirrored left-right (if asked), then turned by angle degrees about its centre."""
    if mirrored:
        image = image[:, ::-1]
    return transform.rotate(image, angle, order=1, preserve_range=True)


def score(fixed, moving, mirrored, angle):
    turned = orient(moving, mirrored, angle)
    shift = phase_cross_correlation(fixed, turned, upsample_factor=1, return_error=False)
    return ncc(fixed, ndimage.shift(turned, shift, order=1))


def register_pair(task):
    """One pair: exhaustive search at quarter size, refinement, full-size translation. Returns the pair's map."""
    fixed_q, moving_q, fixed, moving, coarse_step, refine_step = task
    best = (-2.0, False, 0.0)
    for mirrored in (False, True):
        for angle in np.arange(0.0, 360.0, coarse_step):
            s = score(fixed_q, moving_q, mirrored, angle)
            if s > best[0]:
                best = (s, mirrored, float(angle))
    _, mirrored, centre = best
    for angle in np.arange(centre - coarse_step, centre + coarse_step + 1e-9, refine_step):
        s = score(fixed_q, moving_q, mirrored, angle)
        if s > best[0]:
            best = (s, mirrored, float(angle))
    value, mirrored, angle = best
    turned = orient(moving, mirrored, angle)
    shift = phase_cross_correlation(fixed, turned, upsample_factor=20, return_error=False)
    return pair_map(fixed.shape, mirrored, angle, shift), value, mirrored, angle


def pair_map(shape, mirrored, angle, shift):
    """
    The 3 x 3 map from fixed-section pixels (x, y) to moving-section pixels: fixed(p) ~ moving(P p). It undoes, in
    order, the shift (registered(p) = turned(p - shift)), the turn (skimage.transform.rotate samples its input at
    c + R(angle)(p - c), c the image centre) and the mirror (x -> width - 1 - x).
    """
    height, width = shape
    dy, dx = shift
    unshift = np.array([[1, 0, -dx], [0, 1, -dy], [0, 0, 1]], dtype=float)
    cx, cy = width / 2 - 0.5, height / 2 - 0.5
    t = np.deg2rad(angle)
    c, s = np.cos(t), np.sin(t)
    turn = np.array([[c, -s, cx - c * cx + s * cy], [s, c, cy - s * cx - c * cy], [0, 0, 1]])
    mirror = np.array([[-1, 0, width - 1], [0, 1, 0], [0, 0, 1]], dtype=float) if mirrored else np.eye(3)
    return mirror @ turn @ unshift


def chain(numbers, pair_maps):
    """Each present section's map from the middle section's pixels to its own (pair_maps[i] links numbers[i], numbers[i+1])."""
    middle = len(numbers) // 2
    maps = [None] * len(numbers)
    maps[middle] = np.eye(3)
    for i in range(middle + 1, len(numbers)):
        maps[i] = pair_maps[i - 1] @ maps[i - 1]
    for i in range(middle - 1, -1, -1):
        maps[i] = np.linalg.inv(pair_maps[i]) @ maps[i + 1]
    return maps


def render(numbers, images, maps, shape):
    """The stack on the full canvas: plane k holds section first + k; missing sections interpolated linearly."""
    first, last = numbers[0], numbers[-1]
    volume = np.zeros(shape + (last - first + 1,), dtype=np.float32)  # (y, x, z) until written
    swap = np.array([[0, 1, 0], [1, 0, 0], [0, 0, 1]], dtype=float)  # (x, y) <-> (row, column)
    for number, image, m in zip(numbers, images, maps):
        volume[:, :, number - first] = ndimage.affine_transform(image, swap @ m @ swap, output_shape=shape, order=1)
    rendered = [n - first for n in numbers]
    for k in range(volume.shape[2]):
        if k in rendered:
            continue
        below = max(r for r in rendered if r < k)
        above = min(r for r in rendered if r > k)
        w = (k - below) / (above - below)
        volume[:, :, k] = (1 - w) * volume[:, :, below] + w * volume[:, :, above]
    return volume


def build(args):
    clock = time.perf_counter()
    files = read_series(args.series)
    if len(files) < 2:
        sys.stderr.write(f"{args.series}: fewer than two section images\n")
        return 1
    numbers = list(files)
    read = [read_gray(files[n]) for n in numbers]
    images = [image for image, _ in read]
    dtype = read[0][1]
    full = [normalised(image) for image in images]
    quarter = [normalised(transform.rescale(image, 0.25, anti_aliasing=True, preserve_range=True)) for image in images]
    sys.stderr.write(f"read and prepared {len(numbers)} sections: {time.perf_counter() - clock:.1f} s\n")

    clock = time.perf_counter()
    tasks = [(quarter[i], quarter[i + 1], full[i], full[i + 1], args.coarse_step, args.refine_step) for i in range(len(numbers) - 1)]
    if args.jobs > 1:
        with ProcessPoolExecutor(max_workers=args.jobs) as pool:
            results = list(pool.map(register_pair, tasks))
    else:
        results = [register_pair(t) for t in tasks]
    del tasks, quarter, full
    mirrored = sum(1 for r in results if r[2])
    sys.stderr.write(f"registered {len(results)} pairs ({mirrored} mirrored): {time.perf_counter() - clock:.1f} s\n")

    clock = time.perf_counter()
    maps = chain(numbers, [r[0] for r in results])
    volume = render(numbers, images, maps, images[0].shape)
    sys.stderr.write(f"rendered {volume.shape[2]} planes: {time.perf_counter() - clock:.1f} s\n")

    clock = time.perf_counter()
    if dtype == np.uint16:
        data, kind = np.clip(np.rint(volume * 65535), 0, 65535).astype(np.uint16), np.uint16
    else:
        data, kind = np.clip(np.rint(volume * 255), 0, 255).astype(np.uint8), np.uint8
    data = np.ascontiguousarray(data.transpose(1, 0, 2))  # (x, y, z): i right, j down the image, k the section number
    affine = np.diag([args.pixel_um / 1000, args.pixel_um / 1000, args.spacing_um / 1000, 1.0])
    image = nib.Nifti1Image(data, affine)
    image.set_data_dtype(kind)
    nib.save(image, args.output)
    sys.stderr.write(f"wrote {args.output} {data.shape}: {time.perf_counter() - clock:.1f} s\n")
    return 0


def time_pair(args):
    fixed, _ = read_gray(args.time_pair[0])
    moving, _ = read_gray(args.time_pair[1])
    scale = args.size / max(fixed.shape)
    fixed = transform.rescale(fixed, scale, anti_aliasing=True, preserve_range=True).astype(np.float32)
    moving = transform.rescale(moving, scale, anti_aliasing=True, preserve_range=True).astype(np.float32)
    phase_cross_correlation(fixed, moving, upsample_factor=20, return_error=False)
    times = []
    for _ in range(args.repeat):
        clock = time.perf_counter()
        phase_cross_correlation(fixed, moving, upsample_factor=20, return_error=False)
        times.append(time.perf_counter() - clock)
    print(f"size {fixed.shape[1]}x{fixed.shape[0]}")
    print(f"pcc_seconds {float(np.median(times)):.6f}")
    return 0


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("series", nargs="?")
    parser.add_argument("output", nargs="?")
    parser.add_argument("--pixel-um", type=float, default=1.0)
    parser.add_argument("--spacing-um", type=float, default=1.0)
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--coarse-step", type=float, default=2.0)
    parser.add_argument("--refine-step", type=float, default=0.25)
    parser.add_argument("--time-pair", nargs=2, metavar=("FIXED", "MOVING"))
    parser.add_argument("--size", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    if args.time_pair:
        return time_pair(args)
    if not args.series or not args.output:
        parser.error("give SERIES_FOLDER and OUT.nii.gz, or --time-pair FIXED MOVING")
    return build(args)


if __name__ == "__main__":
    sys.exit(main())
