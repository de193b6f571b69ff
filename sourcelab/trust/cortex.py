"""The localisation space: the cortical sources with Brodmann area codes, mesh and operator.

The shipped head model's sources are the cortical fsaverage5 vertices (the medial wall, label 0
of Yeo et al. 2011's annotation, is not cortex and not a source; :mod:`sourcelab.headmodel.model`).
Each source keeps its fsaverage5 surface vertex number in ``vertices``; ``sources`` are the row
indices of the head model and of every per-source map.

References
----------
Yeo BTT et al. (2011).  J Neurophysiol 106:1125-1165.
Fischl B, Sereno MI, Dale AM (1999).  Cortical surface-based analysis II: inflation,
flattening, and a surface-based coordinate system.  NeuroImage 9:195-207 (from memory): the
fsaverage surfaces and their medial cut.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from .._docs import fill_doc
from ..headmodel.model import N_PER_HEMI


def area_codes(
    template_area: np.ndarray, vertices: np.ndarray, n_left: int, area_numbers: np.ndarray
) -> np.ndarray:
    """Per-source area code ``1 + h * n_areas + k`` (hemisphere ``h``, area ``area_numbers[k]``).

    Parameters
    ----------
    template_area : ndarray of int, shape (n_template,)
        Brodmann number per template vertex (0 = unlabelled).
    vertices : ndarray of int, shape (n_src,)
        Template vertex of each source (left hemisphere ``0..n_left-1``, right after).
    n_left : int
        Template vertices of the left hemisphere.
    area_numbers : ndarray of int, shape (n_areas,)
        The area numbers, in atlas order.

    Returns
    -------
    ndarray of int, shape (n_src,)
        Code per source: ``1..n_areas`` left, ``n_areas+1..2*n_areas`` right; 0 for
        unlabelled sources.
    """
    lab = np.asarray(template_area)[vertices]
    lut = np.zeros(int(max(lab.max(), np.max(area_numbers))) + 1, dtype=np.int64)
    lut[np.asarray(area_numbers)] = np.arange(1, len(area_numbers) + 1)
    code = lut[lab]
    right = np.asarray(vertices) >= n_left
    return np.where(code > 0, code + right * len(area_numbers), 0)


@dataclass(frozen=True, eq=False)
class CortexSpace:
    """Everything peak localisation needs on one source space.

    Attributes
    ----------
    vertices : ndarray of int, shape (n_src,)
        fsaverage5 surface vertex (0..20,483, left first) of each source.
    gain : ndarray, shape (n_ch, n_src)
        Fixed-orientation BEM leadfield of these sources (not re-referenced).
    op : SourceOperator
        sLORETA kernel built from ``gain``.
    codes : ndarray of int, shape (n_src,)
        Brodmann area code per source (0 = none).
    names, hemispheres, lobes : tuple of str
        Per area code (index 0: no area).
    mesh : CorticalMesh
        Mid-thickness mesh (MNI305 mm) over these sources.
    border_mm : ndarray, shape (n_src,)
        Distance along the mesh to the border of the source's area.
    sizes : ndarray of int, shape (n_codes,)
        Sources per area code.
    """

    vertices: np.ndarray
    gain: np.ndarray
    op: object
    codes: np.ndarray
    names: tuple
    hemispheres: tuple
    lobes: tuple
    mesh: object
    border_mm: np.ndarray
    sizes: np.ndarray

    @property
    def n_src(self) -> int:
        return self.vertices.size

    @property
    def right(self) -> np.ndarray:
        """Whether each source lies in the right hemisphere, shape (n_src,) bool."""
        return self.vertices >= N_PER_HEMI

    @property
    def sources(self) -> np.ndarray:
        """Head-model source index of each source of the space (``0..n_src-1``)."""
        return np.arange(self.n_src)

    @property
    def n_areas(self) -> int:
        return len(self.names) - 1

    def label(self, code: int) -> str:
        """``"BA9 left"``.

        Parameters
        ----------
        code : int
            Area code, ``0..n_codes-1``.

        Returns
        -------
        str
            Area name and hemisphere, e.g. ``"BA9 left"``; ``"(none)"`` for code 0.
        """
        return f"{self.names[code]} {self.hemispheres[code]}" if code else "(none)"

    def atlas(self):
        """The Brodmann atlas as an :class:`~sourcelab.rois.Atlas` over *these* sources
        (areas without a source are left out), for :func:`~sourcelab.trust.leakage_matrix`.

        Returns
        -------
        Atlas
            Named ``"brodmann"``, one ROI per area code with sources (vertices are indices of
            this space's sources; centroid the mean mesh position, MNI305 mm).
        """
        from ..rois.atlas import ROI, Atlas

        rois = []
        for c in range(1, len(self.names)):
            v = np.flatnonzero(self.codes == c)
            if v.size:
                cen = self.mesh.pos_mm[v].mean(0)
                rois.append(
                    ROI(
                        self.names[c],
                        self.hemispheres[c],
                        v,
                        (float(cen[0]), float(cen[1]), float(cen[2])),
                    )
                )
        return Atlas("brodmann", "Brodmann areas on the source subset", "", tuple(rois))


def build_space(model, *, lambda2: float = 1 / 9) -> CortexSpace:
    """The :class:`CortexSpace` of a head model's sources (Brodmann labels, lobes, mesh).

    Parameters
    ----------
    model : HeadModel
        Provides ``vertno``, ``gain_fixed`` and the cortical ``surface``.
    lambda2 : float
        λ² of the fixed-orientation sLORETA operator.

    Returns
    -------
    CortexSpace
        Sources of ``model`` in its order, with area codes, names, lobes, mesh and border
        distances (mm).
    """
    from ..inverse.sloreta import sloreta_operator
    from ..rois.registry import brodmann_labels, groupings
    from .localise import border_distance, cortical_mesh

    vertices = np.asarray(model.vertno, dtype=np.int64)
    ba = brodmann_labels()
    # every labelled area, including those lying wholly on the medial wall (no source): they
    # have codes without sources, so the rules that flag them can see them
    numbers = np.unique(ba[ba > 0]).astype(np.int64)
    codes = area_codes(ba, vertices, N_PER_HEMI, numbers)
    lobe_of = {a: lobe for lobe, areas in groupings()["lobes"]["groups"].items() for a in areas}
    names = ("(none)",) + tuple(f"BA{a}" for a in numbers) * 2
    hemis = ("n/a",) + ("left",) * len(numbers) + ("right",) * len(numbers)
    lobes = ("(none)",) + tuple(lobe_of.get(int(a), "n/a") for a in numbers) * 2
    gain = model.gain_fixed
    op = sloreta_operator(gain, lambda2=lambda2)
    surf = model.surface
    mesh = cortical_mesh(surf.faces, surf.mid, vertices)
    return CortexSpace(
        vertices=vertices,
        gain=gain,
        op=op,
        codes=codes,
        names=names,
        hemispheres=hemis,
        lobes=lobes,
        mesh=mesh,
        border_mm=border_distance(codes, mesh),
        sizes=np.bincount(codes, minlength=len(names)),
    )


@functools.lru_cache(maxsize=2)
@fill_doc
def cortex_space(lambda2: float = 1 / 9) -> CortexSpace:
    """The shipped head model's :class:`CortexSpace`, cached.

    Parameters
    ----------
    %(lambda2_fixed_sloreta)s

    Returns
    -------
    CortexSpace
        Cached per ``lambda2`` (treat as read-only).
    """
    from ..headmodel import load_head_model

    return build_space(load_head_model(), lambda2=lambda2)


def template_area_counts(space: CortexSpace) -> np.ndarray:
    """Surface vertices (cortex and medial wall) labelled with each area code, shape (n_codes,).

    The medial-wall share of an area is ``1 - sizes / template_area_counts``.

    Parameters
    ----------
    space : CortexSpace
        Its ``names`` fix the area numbers and the code order.

    Returns
    -------
    ndarray of int, shape (n_codes,)
        fsaverage5 vertices per area code (index 0: vertices in no area of the space).
    """
    from ..rois.registry import brodmann_labels

    ba = brodmann_labels()
    numbers = [int(n[2:]) for n in space.names[1 : len(space.names) // 2 + 1]]
    all_vertices = np.arange(ba.size)
    return np.bincount(
        area_codes(ba, all_vertices, N_PER_HEMI, np.array(numbers)), minlength=len(space.names)
    )
