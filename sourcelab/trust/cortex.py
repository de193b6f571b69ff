"""Cortex-only source space (medial wall removed) with Brodmann area codes, mesh and operator.

FreeSurfer's fsaverage surfaces include the medial "cut" through the corpus callosum,
hippocampus and brain stem, which is not cortex.  sourcelab uses the medial-wall label of Yeo et
al. (2011)'s fsaverage annotation (label 0 of ``atlases/yeo7_fsaverage5.npz``, named
``FreeSurfer_Defined_Medial_Wall`` there): 1,769 of the 20,484 fsaverage5 vertices, leaving
18,715 cortical sources.  Each kept source keeps its fsaverage5 vertex number (``vertices``).

The inverse for the cortex-only space is built from the leadfield with the medial-wall columns
dropped *before* the sLORETA kernel is computed (the kernel's normalisation then only spreads
power over cortex).

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


def cortex_vertices(medial_wall_labels: np.ndarray) -> np.ndarray:
    """Template vertices that are cortex: ``labels > 0`` of a Yeo-style annotation (0 = wall).

    Parameters
    ----------
    medial_wall_labels : ndarray of int, shape (n_template,)

    Returns
    -------
    ndarray of int
        Sorted template vertex numbers.
    """
    return np.flatnonzero(np.asarray(medial_wall_labels) > 0)


def area_codes(template_area: np.ndarray, vertices: np.ndarray, n_left: int,
               area_numbers: np.ndarray) -> np.ndarray:
    """Per-source area code ``1 + h * n_areas + k`` (hemisphere ``h``, area ``area_numbers[k]``).

    Parameters
    ----------
    template_area : ndarray of int, shape (n_template,)
        Brodmann number per template vertex (0 = unlabelled).
    vertices : ndarray of int, shape (n_src,)
    n_left : int
        Template vertices of the left hemisphere.
    area_numbers : ndarray of int, shape (n_areas,)
        The area numbers, in atlas order.

    Returns
    -------
    ndarray of int, shape (n_src,)
        0 for unlabelled sources.
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
        Template vertex per source.
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
    def n_areas(self) -> int:
        return len(self.names) - 1

    def label(self, code: int) -> str:
        """``"BA9 left"``."""
        return f"{self.names[code]} {self.hemispheres[code]}" if code else "(none)"

    def atlas(self):
        """The Brodmann atlas as an :class:`~sourcelab.rois.Atlas` over *these* sources
        (areas without a source are left out), for :func:`~sourcelab.trust.leakage_matrix`."""
        from ..rois.atlas import ROI, Atlas

        rois = []
        for c in range(1, len(self.names)):
            v = np.flatnonzero(self.codes == c)
            if v.size:
                cen = self.mesh.pos_mm[v].mean(0)
                rois.append(ROI(self.names[c], self.hemispheres[c], v,
                                (float(cen[0]), float(cen[1]), float(cen[2]))))
        return Atlas("brodmann", "Brodmann areas on the source subset", "", tuple(rois))


def build_space(model, vertices: np.ndarray, *, lambda2: float = 1 / 9) -> CortexSpace:
    """A :class:`CortexSpace` on ``vertices`` of the shipped template (Brodmann labels, lobes).

    Parameters
    ----------
    model : HeadModel
    vertices : ndarray of int
        Template sources to keep (e.g. :func:`cortex_vertices`, or all 20,484).
    lambda2 : float
    """
    from ..inverse.sloreta import sloreta_kernel
    from ..rois._geometry import template_surface
    from ..rois.registry import brodmann_labels, groupings, load_atlas
    from .localise import border_distance, cortical_mesh

    vertices = np.asarray(vertices, dtype=np.int64)
    ba = brodmann_labels()
    at = load_atlas("brodmann")
    numbers = np.array(sorted({int(r.name[2:]) for r in at.rois}))
    codes = area_codes(ba, vertices, model.n_left, numbers)
    lobe_of = {a: lobe for lobe, areas in groupings()["lobes"]["groups"].items() for a in areas}
    names = ("(none)",) + tuple(f"BA{a}" for a in numbers) * 2
    hemis = ("n/a",) + ("left",) * len(numbers) + ("right",) * len(numbers)
    lobes = ("(none)",) + tuple(lobe_of.get(int(a), "n/a") for a in numbers) * 2
    gain = model.gain_fixed[:, vertices]
    op = sloreta_kernel(gain, lambda2=lambda2)
    surf = template_surface()
    mesh = cortical_mesh(surf.faces, surf.mid, vertices)
    return CortexSpace(vertices=vertices, gain=gain, op=op, codes=codes, names=names,
                       hemispheres=hemis, lobes=lobes, mesh=mesh,
                       border_mm=border_distance(codes, mesh),
                       sizes=np.bincount(codes, minlength=len(names)))


@functools.lru_cache(maxsize=2)
def cortex_space(lambda2: float = 1 / 9, *, cortex_only: bool = True) -> CortexSpace:
    """The shipped head model's cortex-only (or full 20,484-source) space, cached."""
    from ..headmodel import load_head_model
    from ..rois.registry import yeo7_labels

    model = load_head_model()
    verts = cortex_vertices(yeo7_labels()[0]) if cortex_only else np.arange(model.n_src)
    return build_space(model, verts, lambda2=lambda2)


def cortex_source_maps(result, space: CortexSpace | None = None) -> dict[str, np.ndarray]:
    """Cortex-only per-source band power of an analysis, from its cross-spectra.

    The analysis' own maps come from the current (20,484-source) operator; this recomputes them
    with the cortex-only kernel (medial-wall columns dropped before the kernel).  Relative power
    divides by the broadband (1-45 Hz) power, as the pipeline.

    Parameters
    ----------
    result : AnalysisResult
        Needs ``epoch_csd`` and ``epoch_total``.
    space : CortexSpace, optional
        Default :func:`cortex_space` at the result's λ².

    Returns
    -------
    dict
        ``"absolute"`` and ``"relative"``: ndarray, shape (n_bands, n_src).
    """
    from ..errors import InputError
    from ..spectra import relative_power

    if result.epoch_csd is None or getattr(result, "epoch_total", None) is None:
        raise InputError("result: no per-epoch cross-spectra (epoch_csd, epoch_total)")
    if result.config.method != "sLORETA" or result.config.orientation != "fixed":
        raise InputError("cortex-only maps are prototyped for fixed-orientation sLORETA only")
    sp = space or cortex_space(result.config.lambda2)
    ab = sp.op.power(result.epoch_csd.mean(axis=0))
    tot = sp.op.power(result.epoch_total.mean(axis=0))
    return {"absolute": ab, "relative": relative_power(ab, tot)}
