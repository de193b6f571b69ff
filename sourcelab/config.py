"""Analysis configuration: one frozen dataclass, read from TOML, overridable from the CLI."""

from __future__ import annotations

import dataclasses
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .errors import InputError

#: Default frequency bands in Hz, [low, high) (common practice in quantitative EEG).
DEFAULT_BANDS: tuple[tuple[str, float, float], ...] = (
    ("delta", 1.0, 4.0),
    ("theta", 4.0, 8.0),
    ("alpha", 8.0, 12.0),
    ("beta", 12.0, 25.0),
    ("highbeta", 25.0, 30.0),
)

from .constants import SITES_1020  # noqa: E402,F401  (re-exported: historical location)


@dataclass(frozen=True)
class Bands:
    """Named frequency bands.

    Attributes
    ----------
    names : tuple of str
    edges : tuple of (float, float)
        Lower (inclusive) and upper (exclusive) edge of each band, Hz.
    """

    names: tuple[str, ...] = tuple(b[0] for b in DEFAULT_BANDS)
    edges: tuple[tuple[float, float], ...] = tuple((b[1], b[2]) for b in DEFAULT_BANDS)

    def __post_init__(self):
        if len(self.names) != len(self.edges) or not self.names:
            raise InputError("bands: need one (low, high) pair per band name")
        if len(set(self.names)) != len(self.names):
            raise InputError(f"bands: duplicate band names in {self.names}")
        for name, (lo, hi) in zip(self.names, self.edges):
            if not (0 <= lo < hi):
                raise InputError(f"band {name!r}: need 0 <= low < high, got ({lo}, {hi})")

    def __len__(self) -> int:
        return len(self.names)

    def as_list(self) -> list[list]:
        return [[n, float(lo), float(hi)] for n, (lo, hi) in zip(self.names, self.edges)]

    @classmethod
    def from_mapping(cls, mapping: dict) -> "Bands":
        """Build from ``{"alpha": [8, 12], ...}`` (TOML table order is kept)."""
        try:
            items = [(str(k), (float(v[0]), float(v[1]))) for k, v in mapping.items()]
        except (TypeError, ValueError, IndexError) as exc:
            raise InputError(f"bands: each band needs [low, high] in Hz ({exc})") from None
        return cls(tuple(k for k, _ in items), tuple(e for _, e in items))


@dataclass(frozen=True)
class AnalysisConfig:
    """Every parameter that changes the numbers of an analysis.

    Attributes
    ----------
    bands : Bands
    method : {"sLORETA", "eLORETA", "dSPM"}
        Inverse method.  sLORETA is computed by sourcelab itself; the others through MNE.
    orientation : {"fixed", "free"}
        Source orientation: surface-normal, or free with Pascual-Marqui's 3x3 standardisation.
    snr : float
        Amplitude signal-to-noise ratio; the regularisation is ``lambda2 = 1 / snr**2``.
    epoch_s : float
        Epoch length for cleaning and Welch cross-spectra, seconds.
    reject_uv : float
        Peak-to-peak amplitude rejection threshold per epoch, microvolts.
    flat_uv : float
        An epoch whose site varies less than this (peak to peak, µV) is rejected as flat.
    muscle_uv : float
        RMS above this in 25 Hz to ``h_freq`` at any site rejects an epoch as muscle, µV.
    blink_uv : float
        Deflection of the Fp1/Fp2 mean (low-passed at 3 Hz) above this, and at least twice the
        O1/O2 deflection, rejects an epoch as an eye blink, µV.
    min_clean_s : float
        Minimum clean data; less is refused.
    warn_clean_s : float
        Below this much clean data a warning is issued (common practice: 2 minutes).
    l_freq, h_freq : float
        Band-pass edges applied before epoching, Hz.
    notch : float | None
        Mains frequency to notch (50 or 60); None to detect it from the data.
    reliability_threshold : float
        Split-half reliability below this is flagged (common practice: 0.90).
    n_boot : int
        Bootstrap resamples over clean epochs for 95 % intervals of every value and z (0: none).
    boot_seed : int
        Seed of the bootstrap (results are reproducible).
    ci : float
        Confidence level of the intervals.
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
    """

    bands: Bands = field(default_factory=Bands)
    method: str = "sLORETA"
    orientation: str = "fixed"
    snr: float = 3.0
    epoch_s: float = 2.0
    reject_uv: float = 150.0
    flat_uv: float = 0.5
    muscle_uv: float = 8.0
    blink_uv: float = 70.0
    min_clean_s: float = 60.0
    warn_clean_s: float = 120.0
    l_freq: float = 0.5
    h_freq: float = 45.0
    notch: float | None = None
    reliability_threshold: float = 0.90
    n_boot: int = 1000
    boot_seed: int = 0
    ci: float = 0.95
    coupling: bool = True
    coupling_atlases: tuple[str, ...] = ("lobes", "yeo7", "networks")
    coupling_n_boot: int = 199

    def __post_init__(self):
        if self.method not in ("sLORETA", "eLORETA", "dSPM"):
            raise InputError(f"method: {self.method!r} is not one of sLORETA, eLORETA, dSPM")
        if self.orientation not in ("fixed", "free"):
            raise InputError(f"orientation: {self.orientation!r} is not one of fixed, free")
        if not self.snr > 0:
            raise InputError(f"snr: must be > 0, got {self.snr}")
        if not self.epoch_s > 0:
            raise InputError(f"epoch_s: must be > 0, got {self.epoch_s}")
        if self.n_boot < 0 or (0 < self.n_boot < 100):
            raise InputError(f"n_boot: 0 (no intervals) or at least 100, got {self.n_boot}")
        if not 0.5 < self.ci < 1:
            raise InputError(f"ci: must lie between 0.5 and 1, got {self.ci}")
        if self.notch is not None and self.notch not in (50.0, 60.0):
            raise InputError(f"notch: must be 50 or 60 Hz, got {self.notch}")
        if self.coupling_n_boot < 0 or (0 < self.coupling_n_boot < 99):
            raise InputError(f"coupling_n_boot: 0 (no intervals) or at least 99, got "
                             f"{self.coupling_n_boot}")
        if isinstance(self.coupling_atlases, str) or not all(
                isinstance(a, str) for a in self.coupling_atlases):
            raise InputError(f"coupling_atlases: need a list of atlas names, got "
                             f"{self.coupling_atlases!r}")
        object.__setattr__(self, "coupling_atlases", tuple(self.coupling_atlases))

    @property
    def lambda2(self) -> float:
        """Regularisation λ² = 1/SNR² (SNR an amplitude ratio)."""
        return 1.0 / self.snr**2

    def replace(self, **changes) -> "AnalysisConfig":
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["bands"] = self.bands.as_list()
        d["lambda2"] = self.lambda2
        return d


def load_config(path: str | Path | None = None, **overrides) -> AnalysisConfig:
    """Read an analysis configuration from TOML; keyword overrides (e.g. from the CLI) win.

    The file holds top-level keys named like :class:`AnalysisConfig` fields and an optional
    ``[bands]`` table (``alpha = [8, 12]``).  Unknown keys are an error, not silently ignored.
    """
    values: dict = {}
    if path is not None:
        path = Path(path)
        try:
            with open(path, "rb") as f:
                values = tomllib.load(f)
        except FileNotFoundError:
            raise InputError("configuration file not found", path=path) from None
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise InputError(f"not valid TOML ({exc})", path=path) from None
    values.update({k: v for k, v in overrides.items() if v is not None})
    known = {f.name for f in dataclasses.fields(AnalysisConfig)}
    unknown = sorted(set(values) - known)
    if unknown:
        raise InputError(f"unknown configuration keys {unknown}; known: {sorted(known)}", path=path)
    if "bands" in values and isinstance(values["bands"], dict):
        values["bands"] = Bands.from_mapping(values["bands"])
    try:
        return AnalysisConfig(**values)
    except TypeError as exc:
        raise InputError(f"bad configuration value ({exc})", path=path) from None
