"""What one analysis produced: :class:`AnalysisResult` and its typed parts.

The result owns everything the analysis computed (tables, maps, candidates, leakage, the atlases
it used) and knows how to present itself: :meth:`AnalysisResult.write` (the output folder),
:meth:`AnalysisResult.figures` (matplotlib figures), :meth:`AnalysisResult.summary` (text) and a
notebook view (``_repr_html_``).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from .config import AnalysisConfig
from .constants import UNITS  # noqa: F401  (historical import location)
from .provenance import Fingerprint

#: Columns every ``roi_table`` starts with, in order (more follow: p, fdr, interval columns ...).
ROI_COLUMNS = (
    "atlas",
    "roi",
    "hemisphere",
    "band",
    "measure",
    "value",
    "unit",
    "n_vertices",
    "small",
    "resolvable",
    "z",
)
#: Columns every ``sensor_table`` starts with.
SENSOR_COLUMNS = ("channel", "band", "measure", "value", "unit", "z")


@dataclass(frozen=True)
class RecordingInfo:
    """The analysed recording.

    Attributes
    ----------
    path : str | None
        The file read (None for a recording given in memory).
    sha256 : str | None
        Hash of every file read for it.
    sfreq : float
        Sampling rate, Hz.
    duration_s : float
    channel_map : dict of str -> str
        Canonical 10-20 site -> label in the file.
    original_reference : str
        ``"average"``, ``"linked ears"``, ``"single site"`` or ``"unknown"`` (best guess).
    interpolated : tuple of str
        Sites replaced by spherical-spline interpolation.
    annotations : tuple of (str, int, float)
        (description, count, total duration s) of the file's annotations.
    age : float | None
        Participant age in years, as given.
    condition : str | None
        Recording condition, as given (e.g. ``"eyes closed"``).
    """

    path: str | None
    sha256: str | None
    sfreq: float
    duration_s: float
    channel_map: dict
    original_reference: str
    interpolated: tuple[str, ...] = ()
    annotations: tuple[tuple[str, int, float], ...] = ()
    age: float | None = None
    condition: str | None = None

    def to_dict(self) -> dict:
        """The fields as a plain dict (for provenance).

        Returns
        -------
        dict
            One key per attribute (:func:`dataclasses.asdict`).
        """
        return asdict(self)


@dataclass(frozen=True)
class QualitySummary:
    """Data quality of the analysed segment.

    Attributes
    ----------
    kept_s : float
        Clean data analysed, s.
    rejected_s : dict of str -> float
        Seconds removed per reason (see :class:`sourcelab.intake.CleanData`).
    n_epochs : int
        Clean epochs.
    channel_kept_fraction : dict of str -> float
        Per site, the fraction of candidate epochs in which it passed its own checks.
    mains_hz : float | None
        Notched mains frequency (None: none found).
    thresholds : dict
        Effective value of every threshold and filter edge.
    excluded : tuple of dict
        Spans left out of the selection (procedures such as hyperventilation or photic
        stimulation, other states): description, start and stop (s).
    ocular : dict
        Ocular correction: method, removed components (and their scalp maps), the check of the
        slow-wave maximum against areas that can pass for eye activity.
    cleaning_seconds : dict
        Time taken by each cleaning stage, s.
    reliability : dict of str -> ReliabilitySummary
        Split-half and test-retest reliability, for ``"sensors"`` and the first atlas' areas.
    """

    kept_s: float
    rejected_s: dict
    n_epochs: int
    channel_kept_fraction: dict
    mains_hz: float | None
    thresholds: dict
    excluded: tuple = ()
    ocular: dict = field(default_factory=dict)
    cleaning_seconds: dict = field(default_factory=dict)
    reliability: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """The fields as a plain dict (for provenance).

        Returns
        -------
        dict
            One key per attribute; ``excluded`` as a list of dicts, ``reliability`` as
            ``{name: ReliabilitySummary.to_dict()}``.
        """
        d = asdict(self)
        d["excluded"] = [dict(e) for e in self.excluded]
        d["reliability"] = {k: v.to_dict() for k, v in self.reliability.items()}
        return d


@dataclass(frozen=True)
class NormsInfo:
    """The norms an analysis was z-scored against.

    Attributes
    ----------
    path : str | None
    sha256 : str | None
    condition : str
    cohort : dict
        The cohort summary recorded in the norms file.
    n_rows : int
    fingerprint : Fingerprint
    """

    path: str | None
    sha256: str | None
    condition: str
    cohort: dict
    n_rows: int
    fingerprint: Fingerprint

    def to_dict(self) -> dict:
        """The fields as a plain dict (for provenance).

        Returns
        -------
        dict
            ``path``, ``sha256``, ``condition``, ``cohort`` (a copy), ``n_rows`` and ``fingerprint``
            (:meth:`Fingerprint.to_dict`).
        """
        return {
            "path": self.path,
            "sha256": self.sha256,
            "condition": self.condition,
            "cohort": dict(self.cohort),
            "n_rows": self.n_rows,
            "fingerprint": self.fingerprint.to_dict(),
        }


@dataclass(frozen=True, eq=False)
class AnalysisResult:
    """Everything one analysis produced.

    Attributes
    ----------
    config : AnalysisConfig
    fingerprint : Fingerprint
    ch_names : tuple of str
        The 19 sites, canonical order.
    source_abs, source_rel : ndarray, shape (n_bands, n_src), float32
        Absolute (standardised) and relative source band power per cortical template source.
    sensor_abs, sensor_rel : ndarray, shape (n_bands, n_ch)
        Absolute (µV²) and relative band power per electrode (average reference).
    roi_table : DataFrame
        Tidy, one row per atlas x ROI x band x measure; columns start with :data:`ROI_COLUMNS`.
        ``z`` is NaN without norms.
    sensor_table : DataFrame
        Tidy, one row per channel x band x measure; columns start with :data:`SENSOR_COLUMNS`.
    quality : QualitySummary
    recording : RecordingInfo
    norms : NormsInfo | None
    warnings : tuple of str
        Everything the reading, cleaning and z-scoring warned about, once each.
    atlases : tuple of Atlas
        The atlases of the ROI table (custom ROIs included).
    leakage : Leakage | None
        Area-to-area leakage of the inverse (Brodmann areas).
    candidates : DataFrame | None
        Ranked deviations (with norms), see :mod:`sourcelab.targets.candidates`.
    leakage_hints : DataFrame | None
        For each deviating area, the areas leaking most into it.
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch) | None
        Per-epoch band cross-spectra (µV², as recorded; the kernel applies the average
        reference), kept for resampling (confidence intervals) and reliability.
    epoch_onsets_s : ndarray, shape (n_epochs,) | None
        Onset of each clean epoch from the start of the recording, s.
    source_z : dict | None
        With per-source norms: ``{"absolute": (n_bands, n_src), "relative": ...}`` predictive
        z (normal-equivalent) per source, float32.
    epoch_total : ndarray, shape (n_epochs, n_ch, n_ch) | None
        Per-epoch broadband (:data:`sourcelab.config.BROADBAND_HZ`) cross-spectra, the
        denominator of relative power.
    pair_table : DataFrame | None
        Electrode-pair coupling and asymmetry, one row per pair x band x measure (columns
        :data:`sourcelab.coupling.PAIR_COLUMNS`, then with norms ``p`` ... ``robust``); None when
        coupling is off (``AnalysisConfig.coupling``).
    coupling_table : DataFrame | None
        Network and lobe coupling, one row per atlas x edge x band x measure (columns
        :data:`sourcelab.coupling.EDGE_COLUMNS`, then with norms ``p`` ... ``robust``).
    """

    config: AnalysisConfig
    fingerprint: Fingerprint
    ch_names: tuple[str, ...]
    source_abs: np.ndarray
    source_rel: np.ndarray
    sensor_abs: np.ndarray
    sensor_rel: np.ndarray
    roi_table: object
    sensor_table: object
    quality: QualitySummary
    recording: RecordingInfo
    norms: NormsInfo | None = None
    warnings: tuple[str, ...] = ()
    atlases: tuple = ()
    leakage: object | None = None
    candidates: object | None = None
    leakage_hints: object | None = None
    epoch_csd: np.ndarray | None = None
    epoch_onsets_s: np.ndarray | None = None
    epoch_total: np.ndarray | None = None
    source_z: dict | None = None
    pair_table: object | None = None
    coupling_table: object | None = None

    # ------------------------------------------------------------------ access
    @property
    def bands(self):
        """The analysis bands (:class:`sourcelab.config.Bands`)."""
        return self.config.bands

    @property
    def has_z(self) -> bool:
        """True when the tables were z-scored against norms."""
        return self.norms is not None

    def atlas(self, name: str):
        """One of the atlases of the ROI table, by name.

        Parameters
        ----------
        name : str
            Atlas name, e.g. ``"brodmann"``.

        Returns
        -------
        Atlas
            The atlas object used for the ROI table.

        Raises
        ------
        KeyError
            If the analysis did not use that atlas.
        """
        for a in self.atlases:
            if a.name == name:
                return a
        raise KeyError(f"no atlas {name!r} in this result; have {[a.name for a in self.atlases]}")

    def source_map(self, band: str, measure: str = "absolute") -> np.ndarray:
        """Per-source values of one band, shape (n_src,).

        Parameters
        ----------
        band : str
            One of the configured band names.
        measure : {"absolute", "relative"}
            Absolute (sLORETA-standardised) or relative source power.

        Returns
        -------
        ndarray of float32, shape (n_src,)
            A row of :attr:`source_abs` or :attr:`source_rel` (not a copy).
        """
        i = self.bands.names.index(band)
        return (self.source_abs if measure == "absolute" else self.source_rel)[i]

    def roi_z_map(
        self, band: str, measure: str = "absolute", atlas: str = "brodmann"
    ) -> np.ndarray:
        """Per-source map of ROI z-scores (each source gets its ROI's z; NaN elsewhere).

        Parameters
        ----------
        band : str
            One of the configured band names.
        measure : {"absolute", "relative"}
        atlas : str
            Atlas of the ROI table whose ROIs are painted.

        Returns
        -------
        ndarray, shape (n_src,)
            ROI z per source (a source in overlapping ROIs gets the last one's); NaN outside the
            ROIs and everywhere without norms.
        """
        at = self.atlas(atlas)
        out = np.full(self.source_abs.shape[1], np.nan)
        t = self.roi_table
        sel = t[(t.atlas == atlas) & (t.band == band) & (t.measure == measure)]
        z = {(r.roi, r.hemisphere): r.z for r in sel.itertuples()}
        for roi in at.rois:
            out[roi.vertices] = z.get((roi.name, roi.hemisphere), np.nan)
        return out

    # ------------------------------------------------------------------ presentation
    def figures(self, **options) -> dict:
        """The figure set as open matplotlib figures, by name.

        Parameters
        ----------
        **options
            Passed to :func:`sourcelab.figures.result_figures` (``bands``, ``measures``,
            ``surfaces``, ``z_threshold`` ...).

        Returns
        -------
        dict of str -> matplotlib.figure.Figure
            Close them (``matplotlib.pyplot.close``) when done.
        """
        from .figures import result_figures

        return result_figures(self, **options)

    def write(
        self,
        out: str | Path,
        *,
        figures: bool = True,
        report: bool = True,
        maps: bool = True,
        command: list[str] | None = None,
        progress: bool | None = False,
    ) -> Path:
        """Write the output folder (tables, provenance, figures, report, maps), atomically.

        Parameters
        ----------
        out : str | Path
            A new folder, or an earlier sourcelab output folder (replaced).
        figures, report, maps : bool
            Which of the slower outputs to write.
        command : list of str, optional
            The command line to record in ``provenance.json``.
        progress : bool | None
            Stage progress on standard error (None: only when it is a terminal).

        Returns
        -------
        Path
            ``out``.
        """
        from .outputs import write_analysis

        return write_analysis(
            self,
            out,
            figures=figures,
            report=report,
            exports=maps,
            command=command,
            progress=progress,
        )

    def summary(self) -> str:
        """A few lines for a terminal or a log: data kept, deviations, warnings, cautions.

        Returns
        -------
        str
            Newline-separated text.
        """
        from .cautions import SHORT
        from .constants import Z_THRESHOLD

        q = self.quality
        lines = [
            f"analysed {self.recording.path or 'recording'}: {q.kept_s:.0f} s of clean "
            f"data in {q.n_epochs} epochs"
        ]
        t = self.roi_table
        if self.has_z:
            # the predictive test's normal deviate (what p and FDR use), when present
            z = t["z_equivalent" if "z_equivalent" in t else "z"].to_numpy(dtype=float)
            n = int(np.isfinite(z).sum())
            big = int(np.sum(np.abs(z[np.isfinite(z)]) > Z_THRESHOLD))
            lines.append(
                f"{n} area and network z-scores; {big} with |z| > {Z_THRESHOLD} "
                f"({0.05 * n:.0f} expected by chance alone)"
            )
            if self.candidates is not None and len(self.candidates):
                c = self.candidates.iloc[0]
                if "peak_z" in c:  # peak-ranked candidates (per-source norms)
                    lines.append(
                        f"first candidate: {c['band']} {c['measure']} power {c['direction']} "
                        f"in {c['area']} {c['hemisphere']} (peak z {c['peak_z']:+.2f} at MNI "
                        f"{c['x_mni152']:.0f}, {c['y_mni152']:.0f}, {c['z_mni152']:.0f}; "
                        f"probability the generator lies in this area "
                        f"{c['probability']:.0%} under the simulation model)"
                    )
                else:
                    lines.append(
                        f"largest deviation: {c['roi']} {c['hemisphere']} {c['band']} "
                        f"{c['measure']} power, z = {c['z']:+.2f}"
                    )
            tables = [t for t in (self.pair_table, self.coupling_table) if t is not None]
            if tables:
                zc = np.concatenate([t["z"].to_numpy(dtype=float) for t in tables])
                zc = zc[np.isfinite(zc)]
                if zc.size:
                    lines.append(
                        f"{zc.size} electrode-pair and network-coupling z-scores; "
                        f"{int(np.sum(np.abs(zc) > Z_THRESHOLD))} with |z| > "
                        f"{Z_THRESHOLD} ({0.05 * zc.size:.0f} expected by chance "
                        "alone)"
                    )
        else:
            lines.append("no norms given: values only, no z-scores")
        lines += [f"warning: {w}" for w in self.warnings]
        lines.append(SHORT)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        import html

        rows = "".join(f"<li>{html.escape(line)}</li>" for line in self.summary().splitlines())
        table = ""
        if self.candidates is not None and len(self.candidates):
            cols = [
                c
                for c in (
                    "rank",
                    "area",
                    "roi",
                    "hemisphere",
                    "band",
                    "measure",
                    "direction",
                    "peak_z",
                    "z",
                    "probability",
                )
                if c in self.candidates.columns
            ]
            table = self.candidates[cols].head(10).to_html(index=False, float_format="%.2f")
        return f"<div><b>sourcelab analysis</b><ul>{rows}</ul>{table}</div>"

    def __repr__(self) -> str:
        return (
            f"<AnalysisResult {self.recording.path or 'recording'}: "
            f"{self.quality.n_epochs} epochs, {len(self.bands)} bands, "
            f"{'z-scored' if self.has_z else 'no norms'}>"
        )
