"""Analysis configuration: one frozen dataclass, read from TOML, overridable from the CLI."""

from __future__ import annotations

import dataclasses
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .checks import (
    check_number,
    check_option,
    check_path,
    check_text,
    check_type,
    read_bytes_bounded,
)
from .constants import Z_THRESHOLD
from .errors import InputError

#: Largest configuration file read (a configuration is a few hundred bytes).
CONFIG_MAX_BYTES = 1024 * 1024
#: Band names become parts of file names (``maps/absolute_<band>-lh.stc``), so they are plain.
BAND_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_-]{0,31}")
#: At most this many bands (each band costs one cross-spectrum per epoch).
MAX_BANDS = 32
METHODS = ("sLORETA", "eLORETA", "dSPM")
ORIENTATIONS = ("fixed", "free")

#: Default frequency bands in Hz, [low, high): the fixed bands of the IFCN recommendation
#: (Babiloni et al. 2020, "International Federation of Clinical Neurophysiology (IFCN) - EEG
#: research workgroup: Recommendations on frequency and topographic analysis of resting state EEG
#: rhythms. Part 1: Applications in clinical research studies", Clin Neurophysiol 131:285-307):
#: delta < 4, theta 4-8, alpha 8-13, beta 13-30, gamma > 30 Hz; names written as the paper
#: writes them (lower-case Greek-letter names).  Band edges from memory (the search tool found
#: the paper's abstract, not its band table).  Delta starts at the 1-Hz lower edge of the
#: broadband range (:data:`BROADBAND_HZ`); gamma ends at the analysis low-pass ``h_freq``
#: (default 45 Hz), and is left out when ``h_freq`` is at or below 30 Hz.
IFCN_BANDS: tuple[tuple[str, float, float], ...] = (
    ("delta", 1.0, 4.0),
    ("theta", 4.0, 8.0),
    ("alpha", 8.0, 13.0),
    ("beta", 13.0, 30.0),
    ("gamma", 30.0, 45.0),
)
#: The optional sub-bands of the same recommendation (``sub_bands = true`` in the configuration):
#: alpha1 8-10.5, alpha2 10.5-13, beta1 13-20, beta2 20-30 Hz replace alpha and beta (from
#: memory, as above).
IFCN_SUB_BANDS: dict[str, tuple[tuple[str, float, float], ...]] = {
    "alpha": (("alpha1", 8.0, 10.5), ("alpha2", 10.5, 13.0)),
    "beta": (("beta1", 13.0, 20.0), ("beta2", 20.0, 30.0)),
}
#: Lower edge of gamma (Hz); gamma runs from here to the analysis low-pass.
GAMMA_LOW_HZ = 30.0


def standard_bands(
    *, h_freq: float = 45.0, sub_bands: bool = False
) -> tuple[tuple[str, float, float], ...]:
    """The IFCN bands (Babiloni et al. 2020) for an analysis low-passed at ``h_freq``.

    Parameters
    ----------
    h_freq : float
        Analysis low-pass, Hz.  Gamma runs from 30 Hz to ``min(h_freq, 45)`` Hz, and is left
        out when ``h_freq <= 30`` Hz (no gamma band without gamma-frequency data).
    sub_bands : bool
        Replace alpha and beta by alpha1/alpha2 and beta1/beta2.

    Returns
    -------
    tuple of (name, low, high)
        Band name and edges in Hz, in increasing frequency.
    """
    out = []
    top = min(float(h_freq), IFCN_BANDS[-1][2])
    for name, lo, hi in IFCN_BANDS:
        if name == "gamma":
            if top > GAMMA_LOW_HZ:
                out.append((name, lo, top))
            continue
        out.extend(
            IFCN_SUB_BANDS[name] if sub_bands and name in IFCN_SUB_BANDS else ((name, lo, hi),)
        )
    return tuple(out)


#: The default bands at the default low-pass (45 Hz).
DEFAULT_BANDS: tuple[tuple[str, float, float], ...] = standard_bands()

from .constants import SITES_1020  # noqa: E402,F401  (re-exported: historical location)

#: Broadband range (Hz, [low, high)) that relative power divides by: the whole analysed range,
#: fixed and independent of the band list, so a relative value means the same thing whatever
#: bands are configured.  1-45 Hz: below 1 Hz resting EEG is dominated by drift and sweat, above
#: 45 Hz by muscle and mains (common practice; the default band-pass ``l_freq``-``h_freq`` is
#: 0.5-45 Hz).  Every band must lie inside it.
BROADBAND_HZ: tuple[float, float] = (1.0, 45.0)


@dataclass(frozen=True)
class Bands:
    """Named frequency bands.

    Attributes
    ----------
    names : tuple of str
        Letters, digits, ``_`` and ``-``, starting with a letter, at most 32 characters (they
        become parts of output file names).
    edges : tuple of (float, float)
        Lower (inclusive) and upper (exclusive) edge of each band, Hz; ``0 <= low < high``.
    """

    names: tuple[str, ...] = tuple(b[0] for b in DEFAULT_BANDS)
    edges: tuple[tuple[float, float], ...] = tuple((b[1], b[2]) for b in DEFAULT_BANDS)

    def __post_init__(self):
        if not isinstance(self.names, tuple) or not isinstance(self.edges, tuple):
            raise InputError("bands: names and edges must be tuples", field="bands")
        if len(self.names) != len(self.edges) or not self.names:
            raise InputError("bands: need one (low, high) pair per band name", field="bands")
        if len(self.names) > MAX_BANDS:
            raise InputError(
                f"bands: at most {MAX_BANDS} bands, got {len(self.names)}", field="bands"
            )
        if len(set(self.names)) != len(self.names):
            raise InputError(f"bands: duplicate band names in {self.names}", field="bands")
        edges = []
        for name, pair in zip(self.names, self.edges):
            check_text(
                "bands",
                name,
                max_len=32,
                pattern=BAND_NAME,
                allowed_text="a name of letters, digits, _ and - starting with a letter",
            )
            if not isinstance(pair, (tuple, list)) or len(pair) != 2:
                raise InputError(f"bands.{name}: needs [low, high] in Hz", field="bands")
            lo = check_number(f"bands.{name} low edge", pair[0], low=0.0, high=1000.0)
            hi = check_number(f"bands.{name} high edge", pair[1], low=0.0, high=1000.0)
            if not lo < hi:
                raise InputError(
                    f"bands.{name}: need low < high, got [{lo:g}, {hi:g}] Hz", field="bands"
                )
            edges.append((lo, hi))
        object.__setattr__(self, "edges", tuple(edges))
        # overlapping bands would count the same power twice (touching edges are fine: [lo, hi))
        order = sorted(zip(self.edges, self.names))
        for ((lo1, hi1), n1), ((lo2, hi2), n2) in zip(order, order[1:]):
            if lo2 < hi1:
                raise InputError(
                    f"bands {n1!r} ({lo1:g}-{hi1:g} Hz) and {n2!r} "
                    f"({lo2:g}-{hi2:g} Hz) overlap; bands must not overlap",
                    field="bands",
                )

    def __len__(self) -> int:
        return len(self.names)

    @classmethod
    def standard(cls, *, h_freq: float = 45.0, sub_bands: bool = False) -> "Bands":
        """The IFCN bands of :func:`standard_bands`.

        Parameters
        ----------
        h_freq : float
            Analysis low-pass, Hz; gamma is capped at ``min(h_freq, 45)`` Hz and left out when
            ``h_freq <= 30`` Hz.
        sub_bands : bool
            Alpha1/alpha2 and beta1/beta2 in place of alpha and beta.

        Returns
        -------
        bands : Bands
        """
        b = standard_bands(h_freq=h_freq, sub_bands=sub_bands)
        return cls(tuple(n for n, _, _ in b), tuple((lo, hi) for _, lo, hi in b))

    def as_list(self) -> list[list]:
        """The bands as plain lists, in order (for JSON provenance).

        Returns
        -------
        bands : list of [str, float, float]
            ``[name, low, high]`` per band, edges in Hz.
        """
        return [[n, float(lo), float(hi)] for n, (lo, hi) in zip(self.names, self.edges)]

    @classmethod
    def from_mapping(cls, mapping: dict) -> "Bands":
        """Build from ``{"alpha": [8, 12], ...}`` (TOML table order is kept).

        Parameters
        ----------
        mapping : dict of str to [float, float]
            Band name to ``[low, high]`` edges, Hz.

        Returns
        -------
        bands : Bands
            Validated on construction (names, edges, no overlaps).

        Raises
        ------
        sourcelab.errors.InputError
            When ``mapping`` is not a table, or a value is not a pair, naming the band.
        """
        if not isinstance(mapping, dict):
            raise InputError(
                "bands: must be a table of name = [low, high] (Hz), got "
                f"{type(mapping).__name__} {mapping!r:.40}",
                field="bands",
            )
        names, edges = [], []
        for k, v in mapping.items():
            if not isinstance(v, (list, tuple)) or len(v) != 2:
                raise InputError(
                    f"bands.{k}: needs [low, high] in Hz, got {v!r:.40}", field="bands"
                )
            names.append(str(k))
            edges.append(tuple(v))
        return cls(tuple(names), tuple(edges))


@dataclass(frozen=True)
class AnalysisConfig:
    """Every parameter that changes the numbers of an analysis.

    Every field is typed and bounded on construction (:meth:`validate`); a wrong value raises
    :class:`~sourcelab.errors.InputError` naming the field.

    Attributes
    ----------
    bands : Bands | None
        None (the default): the IFCN bands of :func:`standard_bands` for this ``h_freq`` (gamma
        capped by the low-pass) and ``sub_bands``.  Every band must lie inside the band-pass
        ``[l_freq, h_freq]`` and be at least one Welch
        bin (``1 / epoch_s`` Hz) wide; below the Nyquist frequency is checked per recording
        (:func:`check_sampling_rate`).
    sub_bands : bool
        With the default bands: alpha1/alpha2 and beta1/beta2 in place of alpha and beta
        (Babiloni et al. 2020).  Not allowed together with an explicit ``bands`` table.
    method : {"sLORETA", "eLORETA", "dSPM"}
        Inverse method.  sLORETA is computed by sourcelab itself; the others through MNE.
    orientation : {"fixed", "free"}
        Source orientation: surface-normal, or free with Pascual-Marqui's 3x3 standardisation.
    snr : float
        Amplitude signal-to-noise ratio, > 0 and <= 1000; ``lambda2 = 1 / snr**2``.
    epoch_s : float
        Epoch length for cleaning and Welch cross-spectra, 0.25-60 s.
    reject_uv : float
        Peak-to-peak amplitude rejection threshold per epoch with ``rejection = "fixed"``, µV
        (> 0).
    flat_uv : float
        An epoch whose site varies less than this (peak to peak, µV) is rejected as flat
        (>= 0, below ``reject_uv``; 0 disables).
    muscle_uv : float
        RMS above this in 25 Hz to ``h_freq`` at any site rejects an epoch as muscle
        (``rejection = "fixed"``), µV (> 0).
    blink_uv : float
        Deflection of the Fp1/Fp2 mean (low-passed at 3 Hz) above this, and at least twice the
        O1/O2 deflection, rejects an epoch as an eye blink, µV (> 0).  Applied when no ocular
        correction removed anything.
    min_clean_s : float
        Minimum clean data, s (> 0); less is refused.  Default 20 s: spectral parameters of 20 s of
        artefact-free EEG were already test-retest reliable in children (Gasser, Bächer &
        Steinberg 1985, Electroencephalogr Clin Neurophysiol 60:312-319 — from memory); the
        split-half reliability of every analysis is reported and flagged below 0.90.
    warn_clean_s : float
        Below this much clean data a warning is issued (common practice: 2 minutes); >= 0.
    l_freq, h_freq : float
        Band-pass edges applied before epoching, Hz; ``0 < l_freq < h_freq``.
    notch : float | None
        Mains frequency to notch (50 or 60); None to detect it from the data.
    reliability_threshold : float
        Split-half reliability below this is flagged (common practice: 0.90); in (0, 1].
    n_boot : int
        Bootstrap resamples over clean epochs for 95 % intervals of every value and z (0: none;
        else 100-100,000).
    boot_seed : int
        Seed of the bootstrap (results are reproducible); >= 0.
    ci : float
        Confidence level of the intervals, in (0.5, 1).
    rejection : {"auto", "fixed"}
        ``"auto"``: per-site thresholds learned from the recording (robust z of log peak-to-peak
        amplitude and of 25-45 Hz RMS, clipped into age-aware plausibility bounds; see
        :mod:`sourcelab.intake.artefacts`).  ``"fixed"``: ``reject_uv`` and ``muscle_uv`` at
        every site.
    reject_z : float
        Robust z beyond which ``"auto"`` rejects (FASTER's 3), 1-20.
    ocular_correction : {"auto", "ica", "regression", "off"}
        Remove eye artefacts before rejection: ``"auto"`` regresses real EOG channels when the
        recording has them, else ICA with Fp1/Fp2 and F7/F8 as EOG proxies.
    exclude_procedures : bool
        Leave out hyperventilation, post-hyperventilation, photic stimulation and seizure spans
        recognised from the annotations (listed in the clean-data summary).
    coupling : bool
        Compute the electrode-pair and network/lobe coupling tables (``pair_table``,
        ``coupling_table``; see ``sourcelab/coupling/TABLES.md``).
    coupling_atlases : tuple of str
        Atlases whose ROIs are coupled (partitions of 12-16 ROIs; see
        :mod:`sourcelab.coupling.source` for why not the 84 areas).
    coupling_n_boot : int
        Bootstrap replicates over clean epochs for the intervals of pair and edge rows (0: none).
        Fewer than for band power, to keep the analysis fast: the default 199 makes
        ``(B + 1)(1 - ci)/2`` a whole number at ``ci = 0.95``, so each end of the interval is one
        replicate (Davison & Hinkley 1997, section 5.2), and intervals from 199 replicates have
        nearly nominal coverage, with endpoints that vary more from run to run than those from
        1,000 (measured in ``sourcelab/coupling/TABLES.md``).
    z_mask : float | None
        Figures only (no number changes): z maps leave |z| below this uncoloured (default
        :data:`sourcelab.constants.Z_THRESHOLD`, the two-sided 5 % point); 0 or None colours every
        value.  In [0, 10).
    """

    bands: Bands | None = None
    sub_bands: bool = False
    method: str = "sLORETA"
    orientation: str = "fixed"
    snr: float = 3.0
    epoch_s: float = 2.0
    reject_uv: float = 150.0
    flat_uv: float = 0.5
    muscle_uv: float = 8.0
    blink_uv: float = 70.0
    min_clean_s: float = 20.0
    warn_clean_s: float = 120.0
    l_freq: float = 0.5
    h_freq: float = 45.0
    notch: float | None = None
    reliability_threshold: float = 0.90
    n_boot: int = 1000
    boot_seed: int = 0
    ci: float = 0.95
    rejection: str = "auto"
    reject_z: float = 3.0
    ocular_correction: str = "auto"
    exclude_procedures: bool = True
    coupling: bool = True
    coupling_atlases: tuple[str, ...] = ("lobes", "yeo7", "networks")
    coupling_n_boot: int = 199
    z_mask: float | None = Z_THRESHOLD

    def __post_init__(self):
        for name, value in _validated_fields(self).items():
            object.__setattr__(self, name, value)

    @property
    def lambda2(self) -> float:
        """Regularisation λ² = 1/SNR² (SNR an amplitude ratio)."""
        return 1.0 / self.snr**2

    def replace(self, **changes) -> "AnalysisConfig":
        """A copy with some fields changed, validated again.

        Default bands (those of :meth:`Bands.standard` for this ``h_freq`` and ``sub_bands``)
        follow a changed ``h_freq`` or ``sub_bands`` unless ``bands`` is given too.

        Parameters
        ----------
        **changes
            Field names of :class:`AnalysisConfig` and their new values.

        Returns
        -------
        config : AnalysisConfig
            A new configuration; this one is unchanged (frozen).
        """
        if "bands" not in changes and self.bands == Bands.standard(
            h_freq=self.h_freq, sub_bands=self.sub_bands
        ):
            changes["bands"] = None  # default bands follow a changed h_freq / sub_bands
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        """Every field as plain JSON-ready values, for provenance.

        Returns
        -------
        config : dict
            The fields of :class:`AnalysisConfig`, ``bands`` as ``[[name, low_hz, high_hz],
            ...]`` (:meth:`Bands.as_list`), plus the derived ``lambda2`` (1/SNR²).
        """
        d = dataclasses.asdict(self)
        d["bands"] = self.bands.as_list()
        d["lambda2"] = self.lambda2
        return d


#: field -> (kind, low, high, low_open, high_open); bounds are the ranges the pipeline supports:
#: thresholds positive; epochs long enough for a 4 Hz resolution and short enough to leave
#: several epochs in a recording; at most 100,000 bootstrap resamples (CPU time grows linearly).
_NUMBERS = {
    "snr": (float, 0.0, 1000.0, True, False),
    "epoch_s": (float, 0.25, 60.0, False, False),
    "reject_uv": (float, 0.0, None, True, False),
    "flat_uv": (float, 0.0, None, False, False),
    "muscle_uv": (float, 0.0, None, True, False),
    "blink_uv": (float, 0.0, None, True, False),
    "min_clean_s": (float, 0.0, 86400.0, True, False),
    "warn_clean_s": (float, 0.0, 86400.0, False, False),
    "l_freq": (float, 0.0, 1000.0, True, True),
    "h_freq": (float, 0.0, 1000.0, True, False),
    "reliability_threshold": (float, 0.0, 1.0, True, False),
    "n_boot": (int, 0, 100_000, False, False),
    "boot_seed": (int, 0, 2**63 - 1, False, False),
    "ci": (float, 0.5, 1.0, True, True),
    "reject_z": (float, 1.0, 20.0, False, False),
    "coupling_n_boot": (int, 0, 100_000, False, False),
}
#: Choices of the option fields.
_OPTIONS = {
    "rejection": ("auto", "fixed"),
    "ocular_correction": ("auto", "ica", "regression", "off"),
}


def _validated_fields(cfg: AnalysisConfig) -> dict:
    """Check every field of ``cfg``; return the canonical values (floats as float, ...)."""
    out = {
        "method": check_option("method", cfg.method, METHODS),
        "orientation": check_option("orientation", cfg.orientation, ORIENTATIONS),
    }
    for name, (kind, low, high, low_open, high_open) in _NUMBERS.items():
        out[name] = check_number(
            name,
            getattr(cfg, name),
            kind=kind,
            low=low,
            high=high,
            low_open=low_open,
            high_open=high_open,
        )
    for name, allowed in _OPTIONS.items():
        out[name] = check_option(name, getattr(cfg, name), allowed)
    for name in ("exclude_procedures", "coupling", "sub_bands"):
        out[name] = check_type(name, getattr(cfg, name), bool, type_name="true or false")
    atl = cfg.coupling_atlases
    if (
        isinstance(atl, str)
        or not isinstance(atl, (list, tuple))
        or not all(isinstance(a, str) for a in atl)
    ):
        raise InputError(
            f"coupling_atlases: need a list of atlas names, got {atl!r:.60}",
            field="coupling_atlases",
        )
    out["coupling_atlases"] = tuple(atl)
    notch = cfg.notch
    if notch is not None:
        notch = check_number("notch", notch)
        check_option("notch", notch, (50.0, 60.0))
    out["notch"] = notch
    z_mask = cfg.z_mask
    if z_mask is not None:
        z_mask = check_number("z_mask", z_mask, low=0.0, high=10.0, high_open=True)
    out["z_mask"] = z_mask
    if 0 < out["coupling_n_boot"] < 99:
        raise InputError(
            f"coupling_n_boot: 0 (no intervals) or at least 99, got {out['coupling_n_boot']}",
            field="coupling_n_boot",
        )
    if 0 < out["n_boot"] < 100:
        raise InputError(
            f"n_boot: 0 (no intervals) or at least 100, got {out['n_boot']}", field="n_boot"
        )
    if not out["l_freq"] < out["h_freq"]:
        raise InputError(
            f"l_freq: must be below h_freq, got l_freq {out['l_freq']:g} Hz and "
            f"h_freq {out['h_freq']:g} Hz (a high-pass above the low-pass would "
            "make a band-stop)",
            field="l_freq",
        )
    if not out["flat_uv"] < out["reject_uv"]:
        raise InputError(
            f"flat_uv: must be below reject_uv ({out['reject_uv']:g} µV), got {out['flat_uv']:g}",
            field="flat_uv",
        )
    bands = cfg.bands
    if bands is None:
        bands = Bands.standard(h_freq=out["h_freq"], sub_bands=out["sub_bands"])
    elif out["sub_bands"]:
        raise InputError(
            "sub_bands: applies to the default (IFCN) bands only; with a [bands] "
            "table list the sub-bands there",
            field="sub_bands",
        )
    if isinstance(bands, dict):
        bands = Bands.from_mapping(bands)
    if not isinstance(bands, Bands):
        raise InputError(
            "bands: must be a table of name = [low, high] (Hz), got "
            f"{type(bands).__name__} {bands!r:.40}",
            field="bands",
        )
    out["bands"] = bands
    resolution = 1.0 / out["epoch_s"]
    for name, (lo, hi) in zip(bands.names, bands.edges):
        if lo < out["l_freq"] or hi > out["h_freq"]:
            raise InputError(
                f"bands.{name}: {lo:g}-{hi:g} Hz lies outside the filter pass "
                f"band l_freq-h_freq = {out['l_freq']:g}-{out['h_freq']:g} Hz",
                field="bands",
            )
        if hi - lo < resolution:
            raise InputError(
                f"bands.{name}: {lo:g}-{hi:g} Hz is narrower than the "
                f"{resolution:g}-Hz frequency resolution of {out['epoch_s']:g}-s "
                "epochs",
                field="bands",
            )
    return out


def check_sampling_rate(config: AnalysisConfig, sfreq: float, *, where=None) -> None:
    """Refuse a configuration whose bands reach the Nyquist frequency of a recording.

    Parameters
    ----------
    config : AnalysisConfig
        Its band edges and ``l_freq`` are checked.
    sfreq : float
        Sampling rate of the recording, Hz.
    where : str | Path | None
        The recording (named in the message).
    """
    nyq = float(sfreq) / 2.0
    for name, (lo, hi) in zip(config.bands.names, config.bands.edges):
        if hi > nyq:
            raise InputError(
                f"band {name!r} ({lo:g}-{hi:g} Hz) reaches above the Nyquist "
                f"frequency {nyq:g} Hz of this {sfreq:g}-Hz recording",
                path=where,
            )
    if config.l_freq >= nyq:
        raise InputError(
            f"l_freq {config.l_freq:g} Hz is not below the Nyquist frequency "
            f"{nyq:g} Hz of this {sfreq:g}-Hz recording",
            path=where,
        )


def load_config(path: str | Path | None = None, **overrides) -> AnalysisConfig:
    """Read an analysis configuration from TOML; keyword overrides (e.g. from the CLI) win.

    The file holds top-level keys named like :class:`AnalysisConfig` fields and an optional
    ``[bands]`` table (``alpha = [8, 12]``).  Unknown keys are an error, not silently ignored.
    Every error names the file and the field (or the command-line option ``--field`` for an
    override).

    Parameters
    ----------
    path : str or pathlib.Path or None
        TOML configuration file; None: defaults plus ``overrides``.
    **overrides
        Field values that replace those of the file; None values are ignored (an option not
        given on the command line).

    Returns
    -------
    config : AnalysisConfig
        Validated.

    Raises
    ------
    sourcelab.errors.InputError
        When the file is missing, too large, not UTF-8 TOML, has unknown keys, or a value is
        out of range.
    """
    values: dict = {}
    if path is not None:
        path = check_path("--config", path, kind="file", max_bytes=CONFIG_MAX_BYTES)
        data = read_bytes_bounded(path, max_bytes=CONFIG_MAX_BYTES, what="configuration file")
        try:
            values = tomllib.loads(data.decode("utf-8"))
        except UnicodeDecodeError:
            raise InputError("configuration file is not UTF-8 text", path=path) from None
        except tomllib.TOMLDecodeError as exc:
            raise InputError(f"not valid TOML ({exc})", path=path) from None
        except RecursionError:
            raise InputError("not valid TOML (nested too deeply)", path=path) from None
    from_file = set(values)
    given = {k: v for k, v in overrides.items() if v is not None}
    values.update(given)
    known = {f.name for f in dataclasses.fields(AnalysisConfig)}
    unknown = sorted(set(values) - known)
    if unknown:
        raise InputError(f"unknown configuration keys {unknown}; known: {sorted(known)}", path=path)
    try:
        return AnalysisConfig(**values)
    except InputError as exc:
        field_name = (exc.field or "").split(".")[0].split(" ")[0]
        if field_name in given and field_name not in from_file:
            raise InputError(
                f"--{field_name.replace('_', '-')}: {exc.problem.split(': ', 1)[-1]}"
            ) from None
        raise InputError(
            exc.problem, path=path if path is not None else exc.path, field=exc.field
        ) from None
