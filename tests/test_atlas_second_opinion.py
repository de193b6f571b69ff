"""Second opinion on the shipped Brodmann labels: a different Brodmann map, mapped the same way.

The second map is Debian's ``mricron-data`` Brodmann volume on the Colin27 (MNI) brain
(``/usr/share/mricron/templates/brodmann.nii.gz``; Rorden & Brett 2000, Behav Neurol 12:191-200),
an independent delineation on another template.  Two Brodmann maps on different brains disagree
at every boundary, so no fixed agreement level is expected; what must hold is that they agree far
more than two unrelated maps with the same areas would.  The reference for "unrelated" is the
spin test (Alexander-Bloch et al. 2018, NeuroImage 178:540-551): the second map is rotated at
random on the fsaverage5 sphere (the same rotation for the left hemisphere and its mirror image
for the right), which keeps every area's size and shape but breaks its position.  The observed
vertex agreement must exceed every one of the rotations (p < 1/(n + 1)), and so must the Dice
overlap of large areas with clear landmarks.  A broken, shifted or mislabelled label set fails.

Needs the Debian package (root: ``apt-get install mricron-data``): marked ``external``, so it is not
in the README's default run; ``.ci/run`` installs the package and runs ``pytest -m external``.
"""

from pathlib import Path

import nibabel as nib
import numpy as np
import pytest

MRICRON = Path("/usr/share/mricron/templates/brodmann.nii.gz")
N_SPINS = 200
MIRROR = np.diag([-1.0, 1.0, 1.0])

pytestmark = pytest.mark.external


def _random_rotation(rng):
    """A uniformly random 3-D rotation (QR of a Gaussian matrix; Mezzadri 2007)."""
    q, r = np.linalg.qr(rng.standard_normal((3, 3)))
    q = q * np.sign(np.diag(r))
    if np.linalg.det(q) < 0:
        q[:, 0] = -q[:, 0]
    return q


def _spun(labels, spheres, rot):
    """``labels`` (both hemispheres stacked) moved by ``rot`` on each hemisphere's sphere."""
    from scipy.spatial import cKDTree

    out, start = np.empty_like(labels), 0
    for h, sph in enumerate(spheres):
        n = sph.shape[0]
        r = rot if h == 0 else MIRROR @ rot @ MIRROR  # mirror image for the right hemisphere
        idx = cKDTree(sph).query(sph @ r.T)[1]
        out[start : start + n] = labels[start : start + n][idx]
        start += n
    return out


def test_brodmann_labels_agree_with_a_second_map():
    from atlases.build_brodmann import dice_per_area, map_volume_to_surface
    from nilearn import datasets, surface

    from sourcelab.data import data_path

    assert MRICRON.is_file(), "install Debian's mricron-data to run this check"
    labels = np.load(data_path("brodmann_fsaverage5.npz"))["labels"].astype(int)
    medial_wall = np.load(data_path("yeo7_fsaverage5.npz"))["labels"] == 0
    img = nib.load(str(MRICRON))
    data = np.asarray(img.dataobj).astype(np.int64)
    ijk = np.argwhere((data > 0) & (data <= 52))  # Brodmann areas 1-52
    xyz = nib.affines.apply_affine(img.affine, ijk)
    second, _, _ = map_volume_to_surface(xyz, data[tuple(ijk.T)], medial_wall, fill=False)
    second = second.astype(int)
    # most of the cortex is labelled by both (a failed mapping labels little)
    both = (labels > 0) & (second > 0)
    assert both.sum() > 0.5 * np.sum(~medial_wall)

    fs = datasets.fetch_surf_fsaverage("fsaverage5")  # ships inside nilearn: offline
    spheres = [surface.load_surf_mesh(fs[f"sphere_{h}"])[0] for h in ("left", "right")]
    spheres = [s / np.linalg.norm(s, axis=1, keepdims=True) for s in spheres]

    def scores(b):
        ok = (labels > 0) & (b > 0)
        dice = dice_per_area(np.where(ok, labels, 0), np.where(ok, b, 0))
        return np.mean(labels[ok] == b[ok]), dice

    agreement, dice = scores(second)
    rng = np.random.default_rng(0)
    large = (6, 7, 19, 20, 40)  # large areas with clear landmarks
    null_agree = np.empty(N_SPINS)
    null_dice = np.zeros((N_SPINS, len(large)))
    for i in range(N_SPINS):
        a, d = scores(_spun(second, spheres, _random_rotation(rng)))
        null_agree[i] = a
        null_dice[i] = [d.get(k, 0.0) for k in large]
    assert agreement > null_agree.max(), (agreement, null_agree.max())
    for j, area in enumerate(large):
        assert dice[area] > null_dice[:, j].max(), (area, dice[area], null_dice[:, j].max())
