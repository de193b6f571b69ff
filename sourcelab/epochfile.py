"""``epochs.npz``: the per-epoch band cross-spectra of an analysis, compact and not pickled.

An analysis folder's tables hold one value per row, averaged over the clean epochs.  Resampling
those epochs (intervals of a change between sessions, the expected fluctuation of a live feedback
value) needs the epochs themselves, so the analysis also writes them — as the real band
cross-spectra, the quantity every sourcelab number is computed from (ROI and source power are
quadratic forms of it).  Layout (NumPy ``.npz``, read with ``allow_pickle=False``):

==================  ===========================  ===============================================
key                 dtype, shape                 content
==================  ===========================  ===============================================
``format``          str, ()                      ``"sourcelab-epochs/1"``
``fingerprint``     str, ()                      the pipeline fingerprint as JSON
``ch_names``        str, (n_ch,)                 channel order (the 19 sites)
``band_names``      str, (n_bands,)
``band_edges``      float64, (n_bands, 2)        Hz, [low, high)
``epoch_s``         float64, ()                  epoch length, s
``sfreq``           float64, ()                  sampling rate of the recording, Hz
``onsets_s``        float64, (n_epochs,)         onset of each clean epoch, s (NaN if unknown)
``csd_triu``        float32, (n_ep, n_bands, k)  upper triangle (row-major ``numpy.triu_indices``,
                                                 diagonal included, k = n_ch (n_ch + 1) / 2) of
                                                 each epoch's real band cross-spectrum, µV² as
                                                 recorded (the kernel applies the average
                                                 reference)
==================  ===========================  ===============================================

Size: 4 bytes x 190 x 5 bands = 3.8 kB per 2-s epoch, about 0.46 MB for 4 minutes of clean data
(float32 keeps 7 significant digits; the bootstrap's own spread is orders of magnitude larger).
"""

from __future__ import annotations

import json
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._docs import fill_doc
from .errors import InputError
from .provenance import Fingerprint

#: Format tag written into (and required from) every epochs file.
FORMAT = "sourcelab-epochs/1"
#: File name inside an analysis folder.
FILENAME = "epochs.npz"


@dataclass(frozen=True, eq=False)
class EpochSpectra:
    """Per-epoch band cross-spectra of one analysis.

    Attributes
    ----------
    csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch), float64
        Real, symmetric band cross-spectra, µV².
    ch_names : tuple of str
    band_names : tuple of str
    band_edges : ndarray, shape (n_bands, 2)
    epoch_s, sfreq : float
    onsets_s : ndarray, shape (n_epochs,)
        NaN where unknown.
    fingerprint : Fingerprint
    """

    csd: np.ndarray
    ch_names: tuple[str, ...]
    band_names: tuple[str, ...]
    band_edges: np.ndarray
    epoch_s: float
    sfreq: float
    onsets_s: np.ndarray
    fingerprint: Fingerprint

    @property
    def n_epochs(self) -> int:
        return int(self.csd.shape[0])


def pack_triu(csd: np.ndarray) -> np.ndarray:
    """Upper triangles of symmetric matrices, shape (..., n (n + 1) / 2), float32.

    Parameters
    ----------
    csd : ndarray, shape (..., n, n)
        Symmetric matrices, e.g. band cross-spectra in µV².

    Returns
    -------
    ndarray of float32, shape (..., n * (n + 1) // 2)
        Row-major upper triangle (``numpy.triu_indices(n)``), diagonal included; same unit.
    """
    n = csd.shape[-1]
    iu, ju = np.triu_indices(n)
    return np.asarray(csd[..., iu, ju], dtype=np.float32)


def unpack_triu(packed: np.ndarray, n: int) -> np.ndarray:
    """Inverse of :func:`pack_triu`: full symmetric matrices, float64.

    Parameters
    ----------
    packed : ndarray, shape (..., n * (n + 1) // 2)
        Upper triangles as written by :func:`pack_triu`.
    n : int
        Matrix size (number of channels).

    Returns
    -------
    ndarray of float64, shape (..., n, n)
        Symmetric matrices, same unit as ``packed``.

    Raises
    ------
    InputError
        If the last axis of ``packed`` does not have ``n (n + 1) / 2`` entries.
    """
    packed = np.asarray(packed, dtype=float)
    iu, ju = np.triu_indices(n)
    if packed.shape[-1] != iu.size:
        raise InputError(
            f"csd_triu: last axis {packed.shape[-1]} does not hold the upper "
            f"triangle of a {n} x {n} matrix ({iu.size} entries)"
        )
    out = np.zeros(packed.shape[:-1] + (n, n))
    out[..., iu, ju] = packed
    out[..., ju, iu] = packed
    return out


@fill_doc
def write_epochs(
    path: str | Path,
    epoch_csd: np.ndarray,
    *,
    ch_names,
    band_names,
    band_edges,
    epoch_s: float,
    sfreq: float,
    fingerprint: Fingerprint,
    onsets_s: np.ndarray | None = None,
) -> Path:
    """Write ``epochs.npz`` (see the module docstring for the layout).

    Parameters
    ----------
    path : path
        Output file; overwritten.
    epoch_csd : ndarray, shape (n_epochs, n_bands, n_ch, n_ch)
        Real band cross-spectra of each clean epoch, µV² (stored as float32 upper triangles).
    ch_names, band_names : sequence of str
        Channel order (length n_ch) and band names (length n_bands).
    band_edges : array-like, shape (n_bands, 2)
        Band limits, Hz, [low, high).
    epoch_s, sfreq : float
        Epoch length, s, and sampling rate of the recording, Hz.
    fingerprint : Fingerprint
        Pipeline fingerprint of the analysis.
    onsets_s : ndarray, shape (n_epochs,), optional
        Onset of each epoch, s; NaN (unknown) when omitted.

    %(returns_path)s

    Raises
    ------
    InputError
        If ``epoch_csd`` or ``onsets_s`` has the wrong shape.
    """
    c = np.asarray(epoch_csd)
    if c.ndim != 4 or c.shape[-1] != c.shape[-2] or c.shape[-1] != len(ch_names):
        raise InputError(
            f"epoch_csd: need shape (n_epochs, n_bands, {len(ch_names)}, "
            f"{len(ch_names)}), got {c.shape}"
        )
    on = (
        np.full(c.shape[0], np.nan)
        if onsets_s is None
        else np.asarray(onsets_s, dtype=float).reshape(-1)
    )
    if on.shape != (c.shape[0],):
        raise InputError(f"onsets_s: need {c.shape[0]} values, got {on.shape}")
    path = Path(path)
    with open(path, "wb") as f:
        np.savez_compressed(
            f,
            format=np.array(FORMAT),
            fingerprint=np.array(fingerprint.to_json()),
            ch_names=np.array([str(x) for x in ch_names]),
            band_names=np.array([str(x) for x in band_names]),
            band_edges=np.asarray(band_edges, dtype=float).reshape(-1, 2),
            epoch_s=np.array(float(epoch_s)),
            sfreq=np.array(float(sfreq)),
            onsets_s=on,
            csd_triu=pack_triu(c),
        )
    return path


def read_epochs(path: str | Path) -> EpochSpectra:
    """Read an ``epochs.npz`` written by :func:`write_epochs` (never unpickles).

    Parameters
    ----------
    path : path
        The file, or an analysis folder holding it.

    Returns
    -------
    EpochSpectra
        ``csd`` unpacked to full (n_epochs, n_bands, n_ch, n_ch) float64 matrices, µV².

    Raises
    ------
    InputError
        Missing file, not a sourcelab epochs file, inconsistent shapes.
    """
    path = Path(path)
    if path.is_dir():
        path = path / FILENAME
    if not path.is_file():
        raise InputError(
            f"no {FILENAME} (per-epoch spectra); analyse the recording again with "
            "this sourcelab version",
            path=path,
        )
    try:
        with np.load(path, allow_pickle=False) as z:
            d = {k: z[k] for k in z.files}
    except (OSError, ValueError, zipfile.BadZipFile) as exc:
        raise InputError(f"cannot read per-epoch spectra ({exc})", path=path) from None
    if str(d.get("format", "")) != FORMAT:
        raise InputError(
            f"not a sourcelab epochs file (format {str(d.get('format'))!r}, expected {FORMAT!r})",
            path=path,
        )
    try:
        ch = tuple(str(x) for x in d["ch_names"])
        bands = tuple(str(x) for x in d["band_names"])
        edges = np.asarray(d["band_edges"], dtype=float).reshape(len(bands), 2)
        csd = unpack_triu(d["csd_triu"], len(ch))
        onsets = np.asarray(d["onsets_s"], dtype=float)
        fp = Fingerprint.from_dict(json.loads(str(d["fingerprint"])))
        out = EpochSpectra(
            csd=csd,
            ch_names=ch,
            band_names=bands,
            band_edges=edges,
            epoch_s=float(d["epoch_s"]),
            sfreq=float(d["sfreq"]),
            onsets_s=onsets,
            fingerprint=fp,
        )
    except InputError as exc:
        raise InputError(exc.problem, path=path) from None
    except (KeyError, ValueError, TypeError, json.JSONDecodeError) as exc:
        raise InputError(f"malformed {FORMAT} file ({exc!r})", path=path) from None
    if csd.ndim != 4 or csd.shape[1] != len(bands) or onsets.shape != (csd.shape[0],):
        raise InputError(
            f"inconsistent shapes: csd {csd.shape}, {len(bands)} bands, {onsets.shape[0]} onsets",
            path=path,
        )
    return out
