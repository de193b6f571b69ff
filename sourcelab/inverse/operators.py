"""Operators on the shipped template: the cached source operator and ROI power matrices.

ROI mean source power is linear in the sensor cross-spectrum: with ``K_i`` the standardised kernel
rows of source ``i`` (1 row fixed, 3 free), ROI ``r``'s mean power is

    P_r = (1/|r|) Σ_{i∈r} Σ_rows diag(K_i C K_iᵀ) = tr(M_r C),   M_r = (1/|r|) Σ_{i∈r} K_iᵀ K_i,

so per-epoch, resampled or real-time ROI power costs one 19 x 19 contraction per ROI.  The
matrices ``M_r`` are built here once (:func:`roi_power_matrices`) and reused by the analysis,
reliability, bootstrap, leakage and training targets.
"""

from __future__ import annotations

import functools

import numpy as np

from .._docs import fill_doc
from ..errors import InputError


@functools.lru_cache(maxsize=8)
@fill_doc
def inverse_operator(method: str, orientation: str, lambda2: float):
    """The source operator for the shipped head model (cached per parameters).

    Parameters
    ----------
    %(method_orientation_lambda2)s

    Returns
    -------
    SourceOperator
        ``kernel`` (n_rows, n_ch), ``n_src``, ``n_comp``; source power is
        ``Σ_rows diag(K C Kᵀ)``.
    """
    from ..headmodel import load_head_model
    from .methods import make_operator

    return make_operator(
        load_head_model(), method=method, orientation=orientation, lambda2=float(lambda2)
    )


def roi_rows(op, vertices) -> np.ndarray:
    """Kernel rows of a set of sources, source-major.

    Parameters
    ----------
    op : SourceOperator
    vertices : array of int, shape (n_v,)
        Source indices.

    Returns
    -------
    ndarray, shape (n_v * n_comp, n_ch)
        The rows of each source in ``vertices`` order (``n_comp`` consecutive rows per source).
    """
    vertices = np.asarray(vertices, dtype=np.int64)
    if vertices.size == 0:
        raise InputError("ROI has no sources")
    k = np.asarray(op.kernel)
    n_ch = k.shape[-1]
    return k.reshape(op.n_src, op.n_comp, n_ch)[vertices].reshape(-1, n_ch)


def roi_power_matrices(op, vertex_sets) -> np.ndarray:
    """ROI power matrices ``M_r = (1/|r|) Σ_{i∈r} K_iᵀ K_i``.

    Parameters
    ----------
    op : SourceOperator
    vertex_sets : sequence of int arrays
        Source indices of each ROI (``Atlas.vertex_sets()``).

    Returns
    -------
    ndarray, shape (n_rois, n_ch, n_ch)
        Symmetric positive semi-definite; ROI mean power of data with cross-spectrum ``C`` is
        ``tr(M_r C)``.
    """
    n_ch = np.asarray(op.kernel).shape[-1]
    out = np.empty((len(vertex_sets), n_ch, n_ch))
    for r, v in enumerate(vertex_sets):
        rows = roi_rows(op, v)
        out[r] = rows.T @ rows / len(v)
    return out
