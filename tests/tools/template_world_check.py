"""Template-guided build checks with nibabel and SciPy (Debian python3-nibabel, python3-scipy).

  make SOURCE OUT SEED [uint8]
                            a template from a truth volume: 2x2x2 block means (the affine moved to the blocks'
                            centres), square-root contrast scaled to 0..200, Gaussian noise of sd 5; stored as
                            float32, or rounded to uint8 with the last argument
  world BUILT TRUTH         the truth sampled (scipy.ndimage.map_coordinates, order 1) at the world position of
                            every voxel of BUILT (both affines as nibabel reads them); prints JSON with the
                            share of voxels inside the truth, the Pearson r, and both files' axis codes
Exit 3 when nibabel or SciPy is missing.
"""
import json
import sys

try:
    import nibabel as nib
    import numpy as np
    from scipy.ndimage import map_coordinates
except ImportError as e:
    print(e, file=sys.stderr)
    sys.exit(3)


def make(source, out, seed, uint8=False):
    img = nib.load(source)
    d = np.asarray(img.dataobj, dtype=float)
    nx, ny, nz = [s // 2 * 2 for s in d.shape[:3]]
    x = d[:nx, :ny, :nz].reshape(nx // 2, 2, ny // 2, 2, nz // 2, 2).mean(axis=(1, 3, 5))
    x = (x - x.min()) / max(np.ptp(x), 1e-12)
    x = np.sqrt(x) * 200 + np.random.default_rng(seed).normal(0, 5, x.shape)
    a = img.affine.copy()
    a[:3, 3] = img.affine[:3, :3] @ [0.5, 0.5, 0.5] + img.affine[:3, 3]
    a[:3, :3] *= 2
    data = np.clip(np.round(x), 0, 255).astype(np.uint8) if uint8 else x.astype(np.float32)
    nib.save(nib.Nifti1Image(data, a), out)


def world(built, truth):
    b, t = nib.load(built), nib.load(truth)
    bd = np.asarray(b.dataobj, dtype=float)
    td = np.asarray(t.dataobj, dtype=float)
    grid = np.meshgrid(*[np.arange(s) for s in bd.shape[:3]], indexing="ij")
    vox = np.stack([g.ravel() for g in grid] + [np.ones(grid[0].size)])
    at = (np.linalg.inv(t.affine) @ b.affine @ vox)[:3]
    s = map_coordinates(td, at, order=1, cval=np.nan)
    inside = ~np.isnan(s)
    r = float(np.corrcoef(bd.ravel()[inside], s[inside])[0, 1]) if inside.sum() > 2 else 0.0
    print(json.dumps({"inside": float(inside.mean()), "r": r,
                      "built_axes": "".join(nib.aff2axcodes(b.affine)), "truth_axes": "".join(nib.aff2axcodes(t.affine))}))


if __name__ == "__main__":
    if sys.argv[1] == "make":
        make(sys.argv[2], sys.argv[3], int(sys.argv[4]), len(sys.argv) > 5 and sys.argv[5] == "uint8")
    else:
        world(sys.argv[2], sys.argv[3])
