"""Electrode pair sets from 10-20 geometry: all pairs, homologous, anterior-posterior, within a
hemisphere.

Definitions (positions in any head frame with x to the right, y to the front, millimetres):

* **all pairs**: every unordered pair of distinct sites, ``n (n - 1) / 2`` (171 for the 19 10-20
  sites), in canonical site order (``a`` before ``b``).  Used for the tables.
* **midline**: sites whose ``|x - x_mid|`` is below a quarter of the smallest inter-electrode
  distance, ``x_mid`` the median x of all sites (Fz, Cz, Pz in the 10-20 system).
* **homologous**: a left site (``x < x_mid``) and the right site nearest its mirror image
  ``(2 x_mid - x, y, z)``, kept when they are each other's nearest mirror partner and the mirror
  misses by less than half the smallest inter-electrode distance: Fp1-Fp2, F7-F8, F3-F4, T7-T8,
  C3-C4, P7-P8, P3-P4, O1-O2.  Left site first, so asymmetry is ``(L - R)/(L + R)``.
* **anterior-posterior**: the same construction mirrored through the coronal plane of the
  central chain (``y_c`` = median y of the sites within a quarter of the smallest
  inter-electrode distance of the median y: T7, C3, Cz, C4, T8 in 10-20): an anterior site
  (``y > y_c``) and the posterior site nearest its mirror ``(x, 2 y_c - y, z)``: Fp1-O1,
  Fp2-O2, F7-P7, F3-P3, Fz-Pz, F4-P4, F8-P8.  Anterior first.
* **intrahemispheric**: both sites off the midline on the same side (28 pairs per hemisphere for
  10-20).  With the homologous pairs these are the pairs meant for head-map figures.

The 10-20 system places sites by fractions of skull distances symmetric about the midline and
about the central (coronal) chain (Jasper 1958), which is why mirror images find partners; the
fitted fsaverage positions are symmetric to within a few millimetres.

References
----------
Jasper HH (1958).  The ten-twenty electrode system of the International Federation.
Electroencephalogr Clin Neurophysiol 10:371-375.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError


@dataclass(frozen=True)
class PairSets:
    """Electrode pairs of a montage (indices into ``ch_names``; ``a`` before ``b``).

    Attributes
    ----------
    ch_names : tuple of str
    all : ndarray of int, shape (n (n-1)/2, 2)
    homologous : ndarray of int, shape (n_h, 2)
        Left site first.
    anterior_posterior : ndarray of int, shape (n_ap, 2)
        Anterior site first.
    intrahemispheric : ndarray of int, shape (n_i, 2)
    midline : tuple of str
    side : tuple of str
        ``"left"``, ``"right"`` or ``"midline"`` per site.
    """

    ch_names: tuple[str, ...]
    all: np.ndarray
    homologous: np.ndarray
    anterior_posterior: np.ndarray
    intrahemispheric: np.ndarray
    midline: tuple[str, ...]
    side: tuple[str, ...]

    def label(self, pair) -> str:
        """``"F3-F4"`` for a pair of indices.

        Parameters
        ----------
        pair : pair of int
            Indices into :attr:`ch_names`.

        Returns
        -------
        str
            ``"<name a>-<name b>"``.
        """
        a, b = (int(v) for v in pair)
        return f"{self.ch_names[a]}-{self.ch_names[b]}"

    def figure_pairs(self) -> np.ndarray:
        """Homologous then intrahemispheric pairs (the pairs drawn on head maps).

        Returns
        -------
        ndarray of int, shape (n_h + n_i, 2)
            Index pairs into ``ch_names``.
        """
        return np.vstack([self.homologous, self.intrahemispheric])

    def membership(self) -> dict[str, np.ndarray]:
        """Boolean flags per pair of :attr:`all`.

        Returns
        -------
        dict of str to ndarray of bool, each shape (n (n-1)/2,)
            ``homologous``, ``anterior_posterior`` and ``intrahemispheric``: whether each pair of
            :attr:`all` (in either order) belongs to that set.
        """

        def flags(sub):
            keys = {(int(a), int(b)) for a, b in sub} | {(int(b), int(a)) for a, b in sub}
            return np.array([(int(a), int(b)) in keys for a, b in self.all])

        return {
            "homologous": flags(self.homologous),
            "anterior_posterior": flags(self.anterior_posterior),
            "intrahemispheric": flags(self.intrahemispheric),
        }


def _mirror_pairs(
    pos: np.ndarray, axis: int, centre: float, tol: float, first: np.ndarray, second: np.ndarray
) -> list[tuple[int, int]]:
    out = []
    f_idx, s_idx = np.flatnonzero(first), np.flatnonzero(second)
    if not f_idx.size or not s_idx.size:
        return out
    mir = pos.copy()
    mir[:, axis] = 2 * centre - mir[:, axis]
    d = np.linalg.norm(mir[f_idx][:, None, :] - pos[s_idx][None, :, :], axis=-1)
    best_s = d.argmin(axis=1)
    best_f = d.argmin(axis=0)
    for i, j in enumerate(best_s):
        if best_f[j] == i and d[i, j] < tol:
            out.append((int(f_idx[i]), int(s_idx[j])))
    return out


def pair_sets(ch_names, ch_pos) -> PairSets:
    """Pair sets of a montage from its electrode positions (see the module docstring).

    Parameters
    ----------
    ch_names : sequence of str, length n
    ch_pos : ndarray, shape (n, 3)
        Positions, x to the right, y to the front (any unit, e.g. metres or mm).

    Returns
    -------
    PairSets
        All, homologous, anterior-posterior and intrahemispheric pairs, and each site's side.
    """
    names = tuple(str(c) for c in ch_names)
    pos = np.asarray(ch_pos, dtype=float)
    if pos.shape != (len(names), 3) or len(names) < 2:
        raise InputError(f"ch_pos: need shape ({len(names)}, 3) for {len(names)} sites")
    n = len(names)
    d = np.linalg.norm(pos[:, None] - pos[None], axis=-1)
    dmin = d[~np.eye(n, dtype=bool)].min()
    x_mid = float(np.median(pos[:, 0]))
    mid = np.abs(pos[:, 0] - x_mid) < dmin / 4
    left = (pos[:, 0] < x_mid) & ~mid
    right = (pos[:, 0] > x_mid) & ~mid
    homol = _mirror_pairs(pos, 0, x_mid, dmin / 2, left, right)
    # coronal plane of the central chain: the sites nearest the median y
    dy = np.abs(pos[:, 1] - np.median(pos[:, 1]))
    central = dy < dmin / 4
    y_c = float(np.median(pos[central, 1])) if central.any() else float(np.median(pos[:, 1]))
    ant = (pos[:, 1] > y_c) & (np.abs(pos[:, 1] - y_c) >= dmin / 4)
    post = (pos[:, 1] < y_c) & (np.abs(pos[:, 1] - y_c) >= dmin / 4)
    ap = _mirror_pairs(pos, 1, y_c, dmin / 2, ant, post)
    iu, ju = np.triu_indices(n, 1)
    allp = np.column_stack([iu, ju])
    intra = allp[(left[iu] & left[ju]) | (right[iu] & right[ju])]
    side = tuple("midline" if m else ("left" if lft else "right") for m, lft in zip(mid, left))

    def arr(p):
        return np.asarray(sorted(p, key=lambda t: (min(t), max(t))), dtype=np.int64).reshape(-1, 2)

    return PairSets(
        ch_names=names,
        all=allp,
        homologous=arr(homol),
        anterior_posterior=arr(ap),
        intrahemispheric=intra,
        midline=tuple(np.asarray(names)[mid].tolist()),
        side=side,
    )
