"""Dispatch table of inverse methods on the template head model.

* ``sLORETA`` (fixed or free orientation): sourcelab's own kernel (:mod:`.sloreta`).
* ``eLORETA`` and ``dSPM``: MNE-Python's implementations, turned into a kernel by applying MNE's
  inverse operator to an identity "evoked" (one column per electrode), which is exact because both
  are linear in the data.  Source power is then ``Σ_rows diag(K C Kᵀ)`` as for sLORETA.
"""

from __future__ import annotations

import numpy as np

from ..checks import check_option
from ..constants import INVERSE_METHODS, ORIENTATIONS
from .._docs import fill_doc
from ..headmodel.model import HeadModel
from .sloreta import SourceOperator, sloreta_operator


def _sloreta(model: HeadModel, orientation: str, lambda2: float) -> SourceOperator:
    if orientation == "fixed":
        return sloreta_operator(
            model.gain, lambda2=lambda2, orientation="fixed", normals=model.src_nn
        )
    return sloreta_operator(model.gain, lambda2=lambda2, orientation="free")


def _mne_kernel(model: HeadModel, orientation: str, lambda2: float, method: str) -> SourceOperator:
    import mne

    from ..headmodel.mne_bridge import to_mne_forward
    from ..headmodel.sites import make_info

    info = make_info(256.0, average_reference=True)
    fwd = to_mne_forward(model, info)
    noise_cov = mne.Covariance(
        np.eye(len(model.ch_names)) * 1e-12,
        info["ch_names"],
        info["bads"],
        info["projs"],
        nfree=1_000_000,
        verbose="error",
    )
    fixed = orientation == "fixed"
    inv = mne.minimum_norm.make_inverse_operator(
        info, fwd, noise_cov, loose=0.0 if fixed else 1.0, depth=None, fixed=fixed, verbose="error"
    )
    evoked = mne.EvokedArray(
        np.eye(len(model.ch_names)) * 1e-6, info, tmin=0.0, verbose="error"
    )  # one µV per electrode: the kernel per µV
    stc = mne.minimum_norm.apply_inverse(
        evoked,
        inv,
        lambda2=lambda2,
        method=method,
        pick_ori=None if fixed else "vector",
        verbose="error",
    )
    k = stc.data.reshape(-1, len(model.ch_names))
    return SourceOperator(
        kernel=k, orientation=orientation, lambda2=lambda2, n_src=model.n_src, method=method
    )


def _eloreta(model, orientation, lambda2):
    return _mne_kernel(model, orientation, lambda2, "eLORETA")


def _dspm(model, orientation, lambda2):
    return _mne_kernel(model, orientation, lambda2, "dSPM")


#: Method name -> ``f(model, orientation, lambda2) -> SourceOperator``.
METHODS = {"sLORETA": _sloreta, "eLORETA": _eloreta, "dSPM": _dspm}
assert tuple(METHODS) == INVERSE_METHODS  # one list of method names (constants)


@fill_doc
def make_operator(
    model: HeadModel, *, method: str = "sLORETA", orientation: str = "fixed", lambda2: float = 1 / 9
) -> SourceOperator:
    """Build the source operator for ``method`` on ``model``.

    Parameters
    ----------
    model : HeadModel
    %(method_orientation_lambda2)s

    Returns
    -------
    SourceOperator
        Kernel of shape (n_src * n_comp, n_ch), source-major rows.
    """
    check_option("method", method, METHODS)
    check_option("orientation", orientation, ORIENTATIONS)
    return METHODS[method](model, orientation, float(lambda2))
