"""ROI-to-ROI leakage (cross-talk) of a linear source operator, and hints for deviating ROIs.

Definition.  Let every source ``j`` of the source space carry uncorrelated activity of unit
variance (fixed orientation: along its normal; free orientation: unit variance in each of x, y,
z), noise-free.  The expected estimated power of source ``i`` due to source ``j`` is
``||K_i g_j||²`` (``K_i`` the 1 or 3 standardised kernel rows of ``i``, ``g_j`` the 1 or 3
leadfield columns of ``j``): the squared entries of the resolution matrix ``R = K G``.  The
expected ROI-mean power of ROI ``a`` due to the sources of a set ``b`` is

    E[a, b] = (1/|a|) Σ_{i∈a} Σ_{j∈b} ||K_i g_j||²  =  tr(M_a S_b),

with ``M_a = (1/|a|) Σ_{i∈a} K_iᵀ K_i`` (:func:`sourcelab.inverse.roi_power_matrices`) and
``S_b = Σ_{j∈b} g_j g_jᵀ`` (19 x 19 each), so the (n_src x n_src) resolution matrix is never
formed.  The leakage matrix is the share

    L[a, b] = E[a, b] / E[a, all sources],

the fraction of ROI ``a``'s power, under spatially white cortical activity, that comes from ROI
``b``'s sources.  ``L[a, a]`` is the self-share; ``unlabelled[a] = E[a, sources in no ROI of the
atlas] / E[a, all]``.  For an atlas whose ROIs do not overlap, each row of ``L`` plus
``unlabelled`` sums to 1; overlapping ROIs (e.g. bilateral networks) are each counted in full.
Larger ROIs contribute more because they hold more unit-variance sources: the share answers
"where does this ROI's value come from if every cortical source were equally active".
Sensor noise is left out (the regularisation still shapes ``K``).

References
----------
Hauk O, Stenroos M, Treder MS (2019).  Towards an objective evaluation of EEG/MEG source
estimation methods - the linear approach.  NeuroImage 186 (from memory): point-spread and
cross-talk functions as columns and rows of the resolution matrix.
Liu AK, Dale AM, Belliveau JW (2002).  Monte Carlo simulation studies of EEG and MEG localization
accuracy.  Hum Brain Mapp 16:47-62 (from memory): cross-talk between locations.
Pascual-Marqui RD (2002).  Methods Find Exp Clin Pharmacol 24 Suppl D:5-12: sLORETA, zero
localisation error of noise-free point sources.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..constants import ROI_KEY, Z_THRESHOLD
from ..errors import InputError
from ..headmodel.model import fixed_gain
from ..inverse import inverse_operator, roi_power_matrices

#: Columns of :meth:`Leakage.to_frame` (the TSV export).
LEAKAGE_COLUMNS = (
    "atlas",
    "target_roi",
    "target_hemisphere",
    "source_roi",
    "source_hemisphere",
    "share",
    "distance_mm",
)
#: Columns of :func:`leakage_hints`.
HINT_COLUMNS = (
    *ROI_KEY,
    "z",
    "rank",
    "leaker",
    "leaker_hemisphere",
    "share",
    "leaker_z",
    "same_direction",
)


@dataclass(frozen=True, eq=False)
class Leakage:
    """An ROI-to-ROI leakage matrix.

    Attributes
    ----------
    atlas : str
        Atlas name.
    names : tuple of str
        ROI names, atlas order.
    hemispheres : tuple of str
        ``"left"``, ``"right"`` or ``"both"`` per ROI.
    share : ndarray, shape (n_rois, n_rois)
        ``share[a, b]``: fraction of ROI ``a``'s expected power from ROI ``b``'s sources.
    unlabelled : ndarray, shape (n_rois,)
        Fraction from sources in no ROI of the atlas.
    expected : ndarray, shape (n_rois, n_rois)
        ``E[a, b]`` in sLORETA standardised power per unit source variance.
    centroids : ndarray, shape (n_rois, 3)
        ROI centroids, MNI305 mm.
    sizes : ndarray of int, shape (n_rois,)
        Sources per ROI.
    """

    atlas: str
    names: tuple[str, ...]
    hemispheres: tuple[str, ...]
    share: np.ndarray
    unlabelled: np.ndarray
    expected: np.ndarray
    centroids: np.ndarray
    sizes: np.ndarray

    @property
    def self_share(self) -> np.ndarray:
        """``share[a, a]``, shape (n_rois,)."""
        return np.diag(self.share).copy()

    @property
    def labels(self) -> list[str]:
        """Display labels ``"BA17 L"``."""
        return [_label(n, h) for n, h in zip(self.names, self.hemispheres)]

    def distances(self) -> np.ndarray:
        """Centroid distances, mm, shape (n_rois, n_rois).

        Returns
        -------
        ndarray, shape (n_rois, n_rois)
            Euclidean distance between ROI centroids (MNI305), mm; zero on the diagonal.
        """
        d = self.centroids[:, None, :] - self.centroids[None, :, :]
        return np.sqrt((d**2).sum(-1))

    def index(self, name: str, hemisphere: str | None = None) -> int:
        """Row of ROI ``name`` (``hemisphere`` needed when the name occurs more than once).

        Parameters
        ----------
        name : str
            ROI name, matched case-insensitively (e.g. ``"BA17"``).
        hemisphere : {"left", "right", "both"}, optional
            Restricts the match; needed when ``name`` exists in more than one hemisphere.

        Returns
        -------
        int
            Index of the ROI in :attr:`names` (row and column of :attr:`share`).

        Raises
        ------
        InputError
            When no ROI matches (the message lists the available ones) or several do.
        """
        hits = [
            i
            for i, (n, h) in enumerate(zip(self.names, self.hemispheres))
            if n.lower() == str(name).lower() and (hemisphere is None or h == hemisphere)
        ]
        if len(hits) == 1:
            return hits[0]
        if not hits:
            have = sorted({f"{n} ({h})" for n, h in zip(self.names, self.hemispheres)})
            raise InputError(
                f"ROI {name!r}{'' if hemisphere is None else f' ({hemisphere})'} "
                f"is not in atlas {self.atlas!r}; available: {', '.join(have)}"
            )
        hemis = sorted(self.hemispheres[i] for i in hits)
        raise InputError(
            f"ROI {name!r} exists in hemispheres {hemis}; choose one with hemisphere / --hemisphere"
        )

    def top(self, name: str, hemisphere: str | None = None, *, n: int = 10) -> pd.DataFrame:
        """The ROI's self-share and its ``n`` strongest leakers (rows sorted by share).

        Parameters
        ----------
        name : str
            ROI name, as for :meth:`index`.
        hemisphere : {"left", "right", "both"}, optional
            As for :meth:`index`.
        n : int
            Number of leakers listed (other ROIs, strongest share first).

        Returns
        -------
        DataFrame
            ``rank`` (0 = the ROI itself), ``roi``, ``hemisphere``, ``share``, ``distance_mm``;
            a last row ``(unlabelled)`` gives the share from sources in no ROI.
        """
        a = self.index(name, hemisphere)
        order = [b for b in np.argsort(-self.share[a], kind="stable") if b != a][: int(n)]
        dist = self.distances()[a]
        rows = [
            dict(
                rank=0,
                roi=self.names[a],
                hemisphere=self.hemispheres[a],
                share=float(self.share[a, a]),
                distance_mm=0.0,
            )
        ]
        rows += [
            dict(
                rank=k + 1,
                roi=self.names[b],
                hemisphere=self.hemispheres[b],
                share=float(self.share[a, b]),
                distance_mm=float(dist[b]),
            )
            for k, b in enumerate(order)
        ]
        rows.append(
            dict(
                rank=len(rows),
                roi="(unlabelled)",
                hemisphere="n/a",
                share=float(self.unlabelled[a]),
                distance_mm=np.nan,
            )
        )
        return pd.DataFrame(rows, columns=["rank", "roi", "hemisphere", "share", "distance_mm"])

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per (target ROI, source ROI) plus one per target for unlabelled.

        Returns
        -------
        DataFrame
            Columns :data:`LEAKAGE_COLUMNS`, ``n_rois ** 2 + n_rois`` rows: ``share`` (fraction,
            0-1) and centroid ``distance_mm`` (mm; NaN for the ``(unlabelled)`` rows, whose
            ``source_hemisphere`` is ``"n/a"``).
        """
        n = len(self.names)
        a, b = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
        a, b = a.ravel(), b.ravel()
        t = pd.DataFrame(
            {
                "atlas": self.atlas,
                "target_roi": np.asarray(self.names)[a],
                "target_hemisphere": np.asarray(self.hemispheres)[a],
                "source_roi": np.asarray(self.names)[b],
                "source_hemisphere": np.asarray(self.hemispheres)[b],
                "share": self.share[a, b],
                "distance_mm": self.distances()[a, b],
            }
        )
        u = pd.DataFrame(
            {
                "atlas": self.atlas,
                "target_roi": list(self.names),
                "target_hemisphere": list(self.hemispheres),
                "source_roi": "(unlabelled)",
                "source_hemisphere": "n/a",
                "share": self.unlabelled,
                "distance_mm": np.nan,
            }
        )
        return pd.concat([t, u], ignore_index=True)[list(LEAKAGE_COLUMNS)]

    def to_tsv(self, path: str | Path) -> Path:
        """Write :meth:`to_frame` as TSV (temporary file + rename); returns the path.

        Parameters
        ----------
        path : str or Path
            Output file; its name must end in ``.tsv``.  Shares are written with 6 significant
            digits.

        Returns
        -------
        Path
            ``path`` as a :class:`~pathlib.Path`.

        Raises
        ------
        InputError
            When the file name does not end in ``.tsv``.
        """
        from ..provenance import atomic_write_text
        from ..tsv import table_text

        path = Path(path)
        if path.suffix.lower() != ".tsv":
            raise InputError("leakage table: file name must end in .tsv", path=path)
        atomic_write_text(path, table_text(self.to_frame(), float_format="%.6g"))
        return path


def _label(name: str, hemisphere: str) -> str:
    return f"{name} {hemisphere[:1].upper()}" if hemisphere in ("left", "right") else name


def activity_gain(op, gain: np.ndarray, *, normals: np.ndarray | None = None) -> np.ndarray:
    """Leadfield columns of the unit sources matching the operator's orientation.

    Parameters
    ----------
    op : SourceOperator
        Its ``orientation`` and ``n_src`` decide the columns returned.
    gain : ndarray, shape (n_ch, 3 * n_src) or (n_ch, n_src)
        Free-orientation (3 columns per source) or fixed-orientation leadfield.
    normals : ndarray, shape (n_src, 3), optional
        Needed to reduce a free gain for a fixed-orientation operator.

    Returns
    -------
    ndarray, shape (n_ch, n_src * n_comp)
        ``gain`` unchanged when it already fits, or a free gain projected on the normals for a
        fixed operator (``n_comp`` 1 for fixed, 3 for free).

    Raises
    ------
    InputError
        When the column count fits neither orientation, or ``normals`` is missing.
    """
    gain = np.asarray(gain, dtype=float)
    n_ch, n_cols = gain.shape
    if op.orientation == "fixed":
        if n_cols == op.n_src:
            return gain
        if n_cols == 3 * op.n_src:
            if normals is None:
                raise InputError(
                    "normals: needed to reduce a free-orientation gain to the "
                    "fixed-orientation operator (pass HeadModel.src_nn)"
                )
            return fixed_gain(gain, normals)
    elif n_cols == 3 * op.n_src:
        return gain
    raise InputError(
        f"gain: {n_cols} columns do not fit a {op.orientation}-orientation "
        f"operator on {op.n_src} sources"
    )


def roi_gain_outer(g: np.ndarray, roi_vertices, n_comp: int) -> np.ndarray:
    """``S_b = Σ_{j∈b} g_j g_jᵀ`` per ROI (all components of each source).

    Parameters
    ----------
    g : ndarray, shape (n_ch, n_src * n_comp)
        Leadfield of the unit sources, components of each source adjacent (from
        :func:`activity_gain`).
    roi_vertices : sequence of int arrays
        Source indices of each ROI.
    n_comp : int
        Components per source (1 fixed, 3 free).

    Returns
    -------
    ndarray, shape (len(roi_vertices), n_ch, n_ch)
        ``S_b`` per ROI, in (leadfield unit)² per unit source variance.
    """
    g3 = g.reshape(g.shape[0], -1, n_comp)
    out = np.empty((len(roi_vertices), g.shape[0], g.shape[0]))
    for r, v in enumerate(roi_vertices):
        gr = g3[:, v].reshape(g.shape[0], -1)
        out[r] = gr @ gr.T
    return out


def leakage_matrix(op, gain: np.ndarray, atlas, *, normals: np.ndarray | None = None) -> Leakage:
    """ROI-to-ROI leakage of ``op`` on ``atlas`` (see the module docstring for the definition).

    Parameters
    ----------
    op : SourceOperator
        Standardised kernel (n_rows, n_ch); the operator's own orientation sets the activity
        model (fixed: along normals; free: three orientations per source).
    gain : ndarray, shape (n_ch, 3 * n_src) or (n_ch, n_src)
        The leadfield the operator was built from (not re-referenced: the kernel projects).
    atlas : Atlas or str
        An atlas, or the name of a shipped one; every ROI needs at least one source.
    normals : ndarray, shape (n_src, 3), optional
        Surface normals, for a fixed operator with a free gain.

    Returns
    -------
    Leakage
        Shares ``share`` (n_rois, n_rois), ``unlabelled`` (n_rois,), ``expected`` and the ROI
        centroids (MNI305 mm) and sizes (sources).

    References
    ----------
    Hauk O, Stenroos M, Treder MS (2019).  NeuroImage 186 (from memory).
    Liu AK, Dale AM, Belliveau JW (2002).  Hum Brain Mapp 16:47-62 (from memory).
    """
    from ..rois import load_atlas

    at = load_atlas(atlas) if isinstance(atlas, str) else atlas
    g = activity_gain(op, gain, normals=normals)
    verts = [np.asarray(r.vertices, dtype=np.int64) for r in at.rois]
    if not verts or any(v.size == 0 for v in verts):
        raise InputError(f"atlas {at.name!r}: every ROI needs at least one source")
    m = roi_power_matrices(op, verts)  # (n_rois, n_ch, n_ch)
    s = roi_gain_outer(g, verts, op.n_comp)  # (n_rois, n_ch, n_ch)
    expected = np.einsum("acd,bdc->ab", m, s)
    labelled = np.zeros(op.n_src, dtype=bool)
    labelled[np.concatenate(verts)] = True
    g3 = g.reshape(g.shape[0], op.n_src, op.n_comp)
    s_all = g @ g.T
    g_un = g3[:, ~labelled].reshape(g.shape[0], -1)
    s_un = g_un @ g_un.T
    total = np.einsum("acd,dc->a", m, s_all)
    unl = np.einsum("acd,dc->a", m, s_un)
    return Leakage(
        atlas=at.name,
        names=tuple(r.name for r in at.rois),
        hemispheres=tuple(r.hemisphere for r in at.rois),
        share=expected / total[:, None],
        unlabelled=unl / total,
        expected=expected,
        centroids=np.array([r.centroid_mni for r in at.rois], dtype=float),
        sizes=np.array([v.size for v in verts]),
    )


def point_spread_power(op, g: np.ndarray, sources) -> np.ndarray:
    """Noise-free standardised power maps of unit point sources (columns of ``R ∘ R``).

    Parameters
    ----------
    op : SourceOperator
        The operator whose standardised ``kernel`` estimates the sources.
    g : ndarray, shape (n_ch, n_src * n_comp)
        From :func:`activity_gain`.
    sources : array of int, shape (n,)
        Sources to activate one at a time (all of a source's components, unit variance each).

    Returns
    -------
    ndarray, shape (n, op.n_src)
        Expected power at every source due to each activated source.
    """
    sources = np.asarray(sources, dtype=np.int64)
    g3 = g.reshape(g.shape[0], op.n_src, op.n_comp)
    out = np.empty((sources.size, op.n_src))
    for c in range(op.n_comp):
        est = op.kernel @ g3[:, sources, c]  # (n_rows, n)
        pw = (est**2).reshape(op.n_src, op.n_comp, -1).sum(1).T
        out = pw if c == 0 else out + pw
    return out


@functools.lru_cache(maxsize=8)
def leakage_for(
    atlas: str = "brodmann",
    *,
    method: str = "sLORETA",
    orientation: str = "fixed",
    lambda2: float = 1 / 9,
) -> Leakage:
    """Leakage matrix of a shipped atlas for the shipped head model and the cached operator.

    Parameters
    ----------
    atlas : str
        Shipped atlas name.
    method : str
        Inverse method, e.g. ``"sLORETA"``.
    orientation : {"fixed", "free"}
        Source orientation of the operator.
    lambda2 : float
        Regularisation λ² = 1/SNR² (SNR an amplitude ratio; default 1/9, SNR 3).

    Returns
    -------
    Leakage
        Cached per arguments (treat as read-only).
    """
    from ..headmodel import load_head_model

    model = load_head_model()
    op = inverse_operator(method, orientation, float(lambda2))
    return leakage_matrix(op, model.gain, atlas, normals=model.src_nn)


def plot_leakage(
    leakage: Leakage,
    *,
    axes=None,
    figure=None,
    output_file=None,
    log_scale: bool = True,
    vmin: float = 1e-3,
):
    """Heatmap of the leakage shares (target ROI rows, source ROI columns).

    Parameters
    ----------
    leakage : Leakage
        From :func:`leakage_matrix` or :func:`leakage_for`.
    axes : matplotlib Axes, optional
        Draw here; otherwise a new figure sized to the number of ROIs.
    figure : matplotlib Figure, optional
        Figure to draw a new axes into when ``axes`` is not given.
    output_file : str | Path, optional
        PNG written through a temporary name.
    log_scale : bool
        Logarithmic colour scale from ``vmin`` to 1 (shares span orders of magnitude).
    vmin : float
        Lowest share of the colour scale (smaller shares are clipped to it on the log scale).

    Returns
    -------
    matplotlib.figure.Figure
        The figure holding the heatmap and its colour bar.
    """
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm, Normalize

    n = len(leakage.names)
    if axes is None:
        size = min(16.0, 3.0 + 0.16 * n)
        fig = figure or plt.figure(figsize=(size + 1.5, size))
        axes = fig.add_subplot(1, 1, 1)
    else:
        fig = axes.figure
    norm = LogNorm(vmin=vmin, vmax=1.0) if log_scale else Normalize(vmin=0.0, vmax=1.0)
    data = np.clip(leakage.share, vmin, 1.0) if log_scale else leakage.share
    im = axes.imshow(data, cmap="viridis", norm=norm, interpolation="nearest")
    labels = leakage.labels
    step = max(1, n // 60)
    axes.set_xticks(np.arange(0, n, step))
    axes.set_yticks(np.arange(0, n, step))
    axes.set_xticklabels(labels[::step], rotation=90, fontsize=6)
    axes.set_yticklabels(labels[::step], fontsize=6)
    axes.set_xlabel("source ROI (where the power comes from)")
    axes.set_ylabel("target ROI (the reported value)")
    axes.set_title(
        f"Leakage shares, atlas {leakage.atlas} (rows: fraction of power; "
        "spatially white activity)",
        fontsize=9,
    )
    cb = fig.colorbar(im, ax=axes, fraction=0.046, pad=0.02)
    cb.set_label("share of the target ROI's expected power")
    if output_file is not None:
        from ..provenance import save_png

        save_png(fig, output_file, dpi=120, bbox_inches="tight")
    return fig


def leakage_hints(
    roi_table: pd.DataFrame, leakage: Leakage, *, top: int = 3, z_threshold: float = Z_THRESHOLD
) -> pd.DataFrame:
    """For each deviating ROI value, its strongest leakers and whether they deviate alike.

    A deviating ROI whose strongest leakers deviate in the same direction may be showing a
    neighbour's blurred activity rather than its own.

    Parameters
    ----------
    roi_table : DataFrame
        A z-scored ROI table (atlas, roi, hemisphere, band, measure, z); rows of other atlases
        are ignored.
    leakage : Leakage
        Leakage matrix of the same atlas.
    top : int
        Leakers listed per deviating row.
    z_threshold : float
        ``|z| > z_threshold`` marks a deviating row (default 1.96, common practice).

    Returns
    -------
    DataFrame
        Columns :data:`HINT_COLUMNS`, ``top`` rows per deviating ROI x band x measure:
        ``leaker`` (ROI), its ``share`` of the deviating ROI's power, its ``leaker_z`` in the
        same band and measure, ``same_direction`` (the leaker deviates beyond the threshold with
        the same sign).
    """
    need = {"atlas", "roi", "hemisphere", "band", "measure", "z"} - set(roi_table.columns)
    if need:
        raise InputError(f"roi_table lacks columns {sorted(need)}")
    t = roi_table[roi_table["atlas"].astype(str) == leakage.atlas]
    z = pd.to_numeric(t["z"], errors="coerce")
    zmap = {
        (r, h, b, m): v
        for r, h, b, m, v in zip(t["roi"], t["hemisphere"], t["band"], t["measure"], z)
    }
    pos = {(n, h): i for i, (n, h) in enumerate(zip(leakage.names, leakage.hemispheres))}
    rows = []
    dev = t[np.abs(z) > z_threshold]
    for r in dev.itertuples(index=False):
        a = pos.get((r.roi, r.hemisphere))
        if a is None:
            continue
        zr = float(r.z)
        order = [b for b in np.argsort(-leakage.share[a], kind="stable") if b != a][: int(top)]
        for k, b in enumerate(order):
            lz = zmap.get((leakage.names[b], leakage.hemispheres[b], r.band, r.measure), np.nan)
            lz = float(lz) if lz is not None else np.nan
            rows.append(
                dict(
                    atlas=leakage.atlas,
                    roi=r.roi,
                    hemisphere=r.hemisphere,
                    band=r.band,
                    measure=r.measure,
                    z=zr,
                    rank=k + 1,
                    leaker=leakage.names[b],
                    leaker_hemisphere=leakage.hemispheres[b],
                    share=float(leakage.share[a, b]),
                    leaker_z=lz,
                    same_direction=bool(
                        np.isfinite(lz) and abs(lz) > z_threshold and np.sign(lz) == np.sign(zr)
                    ),
                )
            )
    return pd.DataFrame(rows, columns=list(HINT_COLUMNS))
