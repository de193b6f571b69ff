"""Bivariate coupling measures from per-epoch complex cross-spectra (pure array functions).

Every measure here is a function of a few *epoch averages* per frequency bin and pair ``(a, b)``
of nodes (electrodes or ROI signals).  With ``S_e = C_e[a, b]`` the cross-spectrum of epoch
``e`` (:func:`sourcelab.spectra.epoch_bin_cross_spectra`; ``S = X_a conj(X_b)``), ``u_e =
S_e / |S_e|`` its phase factor and ``w_e`` epoch weights summing to 1 (``1/K`` for the estimate,
multinomial counts / K for a bootstrap replicate), the statistics are

    A_re = Σ w Re S,  A_im = Σ w Im S,  A_abs = Σ w |Im S|,  A_sq = Σ w (Im S)²,
    U_re = Σ w Re u,  U_im = Σ w Im u,  P_a = Σ w C_e[a, a],  P_b = Σ w C_e[b, b].

All are linear in ``w``, so the estimate, every bootstrap replicate and every randomisation
replicate is one matrix product of a weight matrix with the per-epoch statistics
(:func:`pair_statistics`), followed by the formulas of :func:`bin_measures`, per bin:

=================  ==========================================================================
``msc``            magnitude-squared coherence ``(A_re² + A_im²) / (P_a P_b)``
``imcoh``          imaginary part of coherency ``A_im / sqrt(P_a P_b)`` (signed; Nolte et al. 2004)
``lagcoh``         lagged coherence ``A_im² / (P_a P_b - A_re²)`` (Pascual-Marqui 2007): the
                   coherence left after removing the instantaneous (zero-lag) part
``wpli``           weighted phase-lag index ``|A_im| / A_abs`` (Vinck et al. 2011)
``wpli2_debiased`` debiased squared wPLI ``(A_im² - A_sq/K) / (A_abs² - A_sq/K)`` (Vinck et al.
                   2011: the sum over pairs of distinct epochs); may be negative
``lps``            lagged phase synchronisation ``U_im² / (1 - U_re²)`` (Pascual-Marqui 2007,
                   2011), the square of the corrected imaginary PLV (Bruña et al. 2018)
``plv``            phase-locking value ``|U|`` (Lachaux et al. 1999), for the phase dispersion
=================  ==========================================================================

Band values (:func:`band_measures`) are the means of the per-bin values over the band's bins:
lagged measures computed from a band-summed cross-spectrum would mix phases that differ between
bins (a fixed time lag is a phase that grows with frequency) and underestimate them.  This is
also what ``mne_connectivity.spectral_connectivity_epochs(..., faverage=True)`` does.  Phase
measures per band:

* ``phase_deg``: angle of the band sum of the mean cross-spectrum (the ``|S|``-weighted circular
  mean of the per-bin phases), degrees, in (-180, 180];
* ``lag_ms``: per-bin time lag ``φ_f / (2π f)`` averaged with weights ``|mean S(f)|``, ms.
  Positive: node ``a`` leads node ``b``.  A lag is unambiguous only while ``|φ_f| < 180°``
  (``|lag| < 1/(2f)``: 62 ms at 8 Hz, 20 ms at 25 Hz); where coupling is weak the phase is
  random and the lag meaningless (read it with ``msc`` or ``lps``);
* ``phase_sd_deg``: circular standard deviation of the per-epoch phase differences,
  ``sqrt(-2 ln PLV)`` per bin (Mardia & Jupp 2000, eq. 2.3.11; from memory), averaged over the
  band, degrees.

References
----------
Nolte G, Bai O, Wheaton L, Mari Z, Vorbach S, Hallett M (2004).  Identifying true brain
interaction from EEG data using the imaginary part of coherency.  Clin Neurophysiol
115:2292-2307.
Pascual-Marqui RD (2007).  Coherence and phase synchronization: generalization to pairs of
multivariate time series, and removal of zero-lag contributions.  arXiv:0706.1776 (from
memory).
Pascual-Marqui RD et al. (2011).  Assessing interactions in the brain with exact low-resolution
electromagnetic tomography.  Phil Trans R Soc A 369:3768-3784.
Vinck M, Oostenveld R, van Wingerden M, Battaglia F, Pennartz CMA (2011).  An improved index of
phase-synchronization for electrophysiological data in the presence of volume-conduction, noise
and sample-size bias.  NeuroImage 55:1548-1565.
Bruña R, Maestú F, Pereda E (2018).  Phase locking value revisited: teaching new tricks to an old
dog.  J Neural Eng 15:056011.
Lachaux JP, Rodriguez E, Martinerie J, Varela FJ (1999).  Measuring phase synchrony in brain
signals.  Hum Brain Mapp 8:194-208.
Mardia KV, Jupp PE (2000).  Directional Statistics.  Wiley (from memory).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np

from .._docs import docdict, fill_doc
from .._threads import limited_threads
from ..errors import InputError

# numpydoc fragments shared by the coupling modules (:func:`sourcelab._docs.fill_doc`)
docdict["coupling_uncertainty"] = """\
null_method : {"analytic", "monte-carlo"} or None
    How the lagged measures' conjugation null is computed
    (:func:`sourcelab.coupling.measures.conjugation_null`); None: no null.
n_null : int
    Replicates of the Monte-Carlo null.
n_boot : int
    Bootstrap replicates over epochs for intervals (0: none).
seed : int
    Seed of the bootstrap (the band-power bootstrap's seed resamples the same epochs) and of
    the randomisation.
ci : float
    Coverage of the bootstrap intervals, e.g. 0.95."""
docdict["band_measures_subset"] = """\
measures : sequence of str
    Subset of :data:`sourcelab.coupling.measures.BAND_MEASURES`."""


#: Decorator: run the function with BLAS (not OpenMP) on one thread.  The coupling step's matrix
#: products are many and mid-sized (epochs x replicates x bins x pairs, 300 epochs deep): a
#: second BLAS thread barely shortens them, and on a busy machine its spinning costs more CPU
#: time than it saves (measured in ``benchmarks/bench_coupling.py``).  One thread gives the same
#: numbers (each sum runs in the same order).
one_blas_thread = limited_threads(user_api="blas")


#: Per-epoch statistics kept by :class:`PairStatistics`.
STAT_NAMES = ("re", "im", "abs_im", "sq_im", "u_re", "u_im")
#: Per-bin measures of :func:`bin_measures`.
BIN_MEASURES = ("msc", "imcoh", "lagcoh", "wpli", "wpli2_debiased", "lps", "plv")
#: Band measures of :func:`band_measures`, in table order.
BAND_MEASURES = (
    "msc",
    "imcoh",
    "lagcoh",
    "wpli",
    "wpli2_debiased",
    "lps",
    "phase_deg",
    "lag_ms",
    "phase_sd_deg",
)
#: Measures whose expectation is zero for instantaneous (zero-lag) mixing of independent sources.
LAGGED_MEASURES = ("imcoh", "lagcoh", "wpli", "wpli2_debiased", "lps")
#: Statistics whose sign flips when an epoch's cross-spectrum is conjugated.
_ODD = ("im", "u_im")
#: The statistics each band measure needs.
_NEEDS = {
    "msc": ("re", "im"),
    "imcoh": ("im",),
    "lagcoh": ("re", "im"),
    "wpli": ("im", "abs_im"),
    "wpli2_debiased": ("im", "abs_im", "sq_im"),
    "lps": ("u_re", "u_im"),
    "plv": ("u_re", "u_im"),
    "phase_deg": ("re", "im"),
    "lag_ms": ("re", "im"),
    "phase_sd_deg": ("u_re", "u_im"),
}


#: Statistics derived from ``re``, ``im`` and ``inv = 1/|S|``: name -> (inputs, function).
_DERIVED = {
    "abs_im": (("im",), np.abs),
    "sq_im": (("im",), lambda im: im * im),
    "u_re": (("re", "inv"), np.multiply),
    "u_im": (("im", "inv"), np.multiply),
}
#: Statistics up to this size (per statistic) are made for all epochs at once and kept
#: (:func:`band_coupling` takes one band at a time: a 10-minute recording's widest band is 300
#: epochs x 34 bins x 171 pairs, 7 MB; 88 bins of all bands would be 18 MB) ...
_WHOLE_BYTES = 24 * 2**20
#: ... larger ones (longer recordings) in epoch blocks of at most this size per statistic.
_BLOCK_BYTES = 8 * 2**20
#: Bytes per statistic of one pass of bootstrap replicates (:func:`band_coupling`).
_BOOT_BYTES = _BLOCK_BYTES
#: Bytes per statistic of the replicates whose per-bin measures are made at once (cache-sized).
_POST_BYTES = 256 * 2**10
#: Key suffix of the pair-major copies of statistics that :meth:`PairStatistics._base` makes.
_PAIR_MAJOR = "@pairs"
#: Elements of the gathered coefficients held at once while a block is made (256 kB each).
_GATHER_ELEMENTS = 64_000


def _derive(base: dict, name: str, bins=None) -> np.ndarray:
    if name in base:
        x = base[name]
        return x if bins is None else x[:, bins]
    if name not in _DERIVED:
        raise InputError(f"statistic: {name!r} is not one of {STAT_NAMES}")
    needs, fn = _DERIVED[name]
    if bins is None:
        return fn(*(base[k] for k in needs))
    return fn(*(base[k][:, bins] for k in needs))


@dataclass(frozen=True, eq=False)
class PairStatistics:
    """Per-epoch, per-bin statistics of node pairs (the input of every estimate and resample).

    From Fourier coefficients of a long recording the statistics are not held for all epochs at
    once: they are made for one block of epochs at a time (at most :data:`_BLOCK_BYTES` per
    statistic) whenever they are accumulated, and only ``Re S``, ``Im S`` and ``1/|S|`` are
    made per block (``|Im S|``, ``(Im S)²`` and the phase factor ``u = S/|S|`` are elementwise
    functions of them).  A recording whose statistics fit :data:`_WHOLE_BYTES` (one band of
    up to ~30 minutes, :meth:`select_bins`) is one block, made once and kept.  Every
    accumulation is a sum over epochs, so blocks add up
    (memory flat in recording length; float32 sums in another order, so the last digits of
    single precision differ from one block).

    Attributes
    ----------
    stored : dict or None
        All of :data:`STAT_NAMES` -> ndarray, shape (n_epochs, n_bins, n_pairs), float32, when
        built from cross-spectra (:func:`pair_statistics`); None when built from coefficients.
    coef : tuple of ndarray or None
        ``(Re X, Im X)``, each shape (n_epochs, n_bins, n_nodes), float32
        (:func:`pair_statistics_from_fourier`).
    power : ndarray, shape (n_epochs, n_bins, n_nodes), float32
        Auto-spectra (real diagonal) per epoch.
    ia, ib : ndarray of int, shape (n_pairs,)
        Node indices of each pair.
    freqs : ndarray, shape (n_bins,)
        Hz.
    """

    stored: dict | None
    power: np.ndarray
    ia: np.ndarray
    ib: np.ndarray
    freqs: np.ndarray
    coef: tuple | None = None
    _kept: dict = field(default_factory=dict, repr=False)
    _means: dict = field(default_factory=dict, repr=False)

    @property
    def n_epochs(self) -> int:
        return self.power.shape[0]

    def blocks(self) -> list[slice]:
        """Epoch blocks: one up to :data:`_WHOLE_BYTES` per statistic (or when stored), else
        blocks of at most :data:`_BLOCK_BYTES`.

        Returns
        -------
        list of slice
            Consecutive epoch ranges covering all epochs.
        """
        k = self.n_epochs
        if self.stored is not None:
            return [slice(0, k)]
        per_epoch = max(1, self.power.shape[1] * self.ia.size * 4)
        if k * per_epoch <= _WHOLE_BYTES:
            return [slice(0, k)]
        step = max(1, _BLOCK_BYTES // per_epoch)
        return [slice(s, min(s + step, k)) for s in range(0, k, step)]

    def _base(self, e: slice) -> dict:
        """``re``, ``im``, ``inv`` (or the stored statistics) of the epochs ``e``."""
        if self.stored is not None:
            return self.stored
        whole = e.start == 0 and e.stop >= self.n_epochs
        if whole and self._kept:
            return self._kept
        xr, xi = (c[e] for c in self.coef)
        ia, ib = self.ia, self.ib
        n_ep, n_bins, n_nodes = xr.shape
        n_rows = n_ep * n_bins
        re, im, inv = (np.empty((n_rows, ia.size), dtype=np.float32) for _ in range(3))
        # ``im`` and ``u_im`` also pair-major, (n_pairs, epochs x bins), as the grams of the
        # analytic null read them (:meth:`grams`; no transposition there)
        im_p, u_im_p = (np.empty((ia.size, n_rows), dtype=np.float32) for _ in range(2))
        # node-major copies (n_nodes, epochs x bins): the nodes of every pair are then gathered
        # as whole rows (contiguous copies, exact for any input; ~4x faster than gathering
        # along the short node axis), the products made pair-major and transposed into place
        nr, ni, npw = (
            np.ascontiguousarray(x.reshape(n_rows, n_nodes).T) for x in (xr, xi, self.power[e])
        )
        # a cache-sized block of epochs x bins at a time (elementwise: the same numbers as all
        # at once)
        step = max(1, _GATHER_ELEMENTS // max(1, ia.size))
        for s in range(0, n_rows, step):
            g = slice(s, s + step)
            ar, br = np.take(nr[:, g], ia, axis=0), np.take(nr[:, g], ib, axis=0)
            ai, bi = np.take(ni[:, g], ia, axis=0), np.take(ni[:, g], ib, axis=0)
            tmp = np.multiply(ai, bi)
            x = np.multiply(ar, br)
            x += tmp
            re[g] = x.T  # Re(X_a conj(X_b))
            np.multiply(ar, bi, out=tmp)
            np.multiply(ai, br, out=x)
            x -= tmp
            im[g] = x.T  # Im(X_a conj(X_b))
            im_p[:, g] = x
            mag = np.multiply(np.take(npw[:, g], ia, axis=0), np.take(npw[:, g], ib, axis=0))
            np.sqrt(mag, out=mag)
            # 1/|S|, 0 where S = 0 (unmasked, then the few zeros set: 4x faster than where=)
            with np.errstate(divide="ignore", invalid="ignore"):
                np.divide(np.float32(1.0), mag, out=x)
            bad = ~(mag > 0)
            if bad.any():
                x[bad] = 0.0
            inv[g] = x.T
            np.multiply(im_p[:, g], x, out=u_im_p[:, g])  # u_im = im * inv, as _derive
        re, im, inv = (y.reshape(n_ep, n_bins, ia.size) for y in (re, im, inv))
        base = {"re": re, "im": im, "inv": inv}
        for name, y in (("im", im_p), ("u_im", u_im_p)):
            base[name + _PAIR_MAJOR] = y.reshape(ia.size, n_ep, n_bins)
        if whole:
            self._kept.update(base)
            return self._kept
        return base

    def _stat(self, base: dict, name: str) -> np.ndarray:
        if base is self._kept:  # the whole recording in one block: derived statistics kept
            if name not in base:
                base[name] = _derive(base, name)
            return base[name]
        return _derive(base, name)

    def stat(self, name: str, bins=None) -> np.ndarray:
        """One statistic of :data:`STAT_NAMES` for all epochs (tests and small inputs).

        Parameters
        ----------
        name : str
            One of :data:`STAT_NAMES`.
        bins : int array or slice, optional
            Only these bins.

        Returns
        -------
        ndarray, shape (n_epochs, n_bins or n_sel, n_pairs), float32
        """
        parts = [self._stat(self._base(e), name) for e in self.blocks()]
        x = parts[0] if len(parts) == 1 else np.concatenate(parts)
        return x if bins is None else x[:, bins]

    @property
    def stats(self) -> dict:
        """All of :data:`STAT_NAMES` -> ndarray, shape (n_epochs, n_bins, n_pairs) (made now)."""
        return {n: self.stat(n) for n in STAT_NAMES}

    def accumulate(
        self,
        weights: np.ndarray | None = None,
        *,
        signs: np.ndarray | None = None,
        names=STAT_NAMES,
    ) -> tuple[dict, np.ndarray]:
        """Weighted epoch averages of the statistics.

        Parameters
        ----------
        weights : ndarray, shape (n_rep, n_epochs), optional
            Rows summing to 1; default one row of ``1/n_epochs`` (the estimate, in float64).
        signs : ndarray, shape (n_rep, n_epochs) of ±1, optional
            Conjugation randomisation: epoch ``e`` of replicate ``r`` enters with its
            cross-spectrum conjugated where ``signs[r, e] < 0`` (the odd statistics ``im`` and
            ``u_im`` change sign), with weight ``1/n_epochs``; the even statistics and the
            powers are the plain means (returned with a leading axis of 1, broadcasting).
        names : sequence of str
            Statistics to accumulate.

        Returns
        -------
        acc : dict
            name -> ndarray, shape (n_rep or 1, n_bins, n_pairs)
        power : ndarray, shape (n_rep or 1, n_bins, n_nodes)
            Weighted mean node power ``|X|²`` (µV²/Hz per bin for sensor coefficients).
        """
        if weights is None and signs is None:
            # the plain means (estimate and analytic null alike): made once per statistic
            todo = [n for n in names if n not in self._means]
            if todo or "power" not in self._means:
                acc, power = self._accumulate(None, None, todo)
                for x in (*acc.values(), power):
                    x.setflags(write=False)  # shared by every caller
                self._means.update(acc, power=power)
            return {n: self._means[n] for n in names}, self._means["power"]
        return self._accumulate(weights, signs, names)

    def _accumulate(self, weights, signs, names) -> tuple[dict, np.ndarray]:
        k = self.n_epochs
        rows = None
        if signs is not None:
            rows = np.asarray(signs, dtype=np.float32) / np.float32(k)
        elif weights is not None:
            rows = np.asarray(weights, dtype=np.float32)
            if rows.ndim != 2 or rows.shape[1] != k:
                raise InputError(f"weights: need shape (n_rep, {k}), got {rows.shape}")

        def product(r, a):  # (n_rep, K_block) @ (K_block, n_bins, n_pairs)
            return (r @ a.reshape(a.shape[0], -1)).reshape((r.shape[0],) + a.shape[1:])

        tot: dict = {}  # running float32 sums over blocks (one block: the sum itself)
        for e in self.blocks():
            base = self._base(e)
            for n in names:
                x = self._stat(base, n)
                if rows is None or (signs is not None and n not in _ODD):
                    part = x.sum(axis=0)  # float32 sum (fast)
                else:
                    part = product(rows[:, e], x)
                del x
                if n in tot:
                    tot[n] += part
                else:
                    tot[n] = part
            del base
        acc = {
            n: (t / np.float32(k)).astype(float)[None] if t.ndim == 2 else t for n, t in tot.items()
        }

        if rows is None or signs is not None:
            power = (self.power.sum(axis=0) / np.float32(k)).astype(float)[None]
        else:
            power = product(rows, self.power)
        return acc, power

    def select_bins(self, bins) -> PairStatistics:
        """The same statistics restricted to some frequency bins (e.g. one band's).

        Every statistic and measure is per bin, so a band's values, null and intervals computed
        from its own bins are those of the whole spectrum; the restricted statistics hold only
        those bins, so the per-epoch statistics made from them are that much smaller.

        Parameters
        ----------
        bins : int array or slice
            Positions in the bin axis.

        Returns
        -------
        PairStatistics
            With ``n_bins`` = the selected bins (a new, empty cache of derived statistics).
        """

        def sel(x):
            return np.ascontiguousarray(x[:, bins])

        return PairStatistics(
            stored=None if self.stored is None else {k: sel(v) for k, v in self.stored.items()},
            power=sel(self.power),
            ia=self.ia,
            ib=self.ib,
            freqs=np.asarray(self.freqs[bins]),
            coef=None if self.coef is None else tuple(sel(c) for c in self.coef),
        )

    def grams(self, names, band_idx) -> dict[str, list[np.ndarray]]:
        """``Σ_e x_e(f) x_e(f')`` of statistics over each band's bins, in one pass over epochs.

        Parameters
        ----------
        names : sequence of str
            Statistics of :data:`STAT_NAMES`.
        band_idx : sequence of int arrays
            Bins of each band.

        Returns
        -------
        dict
            name -> list (per band) of ndarray, shape (n_pairs, n_b, n_b), float64.
        """
        out = {n: [None] * len(band_idx) for n in names}
        for e in self.blocks():
            base = self._base(e)
            for n in names:
                pm = base.get(n + _PAIR_MAJOR)  # (n_pairs, n_epochs, n_bins), made by _base
                x = self._stat(base, n) if pm is None else None
                for b, idx in enumerate(band_idx):
                    sel = _bin_selection(idx)  # a view where the bins are contiguous
                    g = _gram(x[:, sel]) if pm is None else _gram_pair_major(pm[:, :, sel])
                    out[n][b] = g if out[n][b] is None else out[n][b] + g
            del base
        return out


def _statistics(s: np.ndarray, power: np.ndarray, ia, ib, freqs) -> PairStatistics:
    s = s.astype(np.complex64, copy=False)
    mag = np.abs(s)
    u = np.divide(s, mag, out=np.zeros_like(s), where=mag > 0)
    im = np.ascontiguousarray(s.imag)
    stats = {
        "re": np.ascontiguousarray(s.real),
        "im": im,
        "abs_im": np.abs(im),
        "sq_im": im * im,
        "u_re": np.ascontiguousarray(u.real),
        "u_im": np.ascontiguousarray(u.imag),
    }
    return PairStatistics(
        stored=stats,
        power=np.ascontiguousarray(power, dtype=np.float32),
        ia=ia,
        ib=ib,
        freqs=np.asarray(freqs, dtype=float),
    )


def _check_pairs(pairs, n: int) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    if p.size and (p.min() < 0 or p.max() >= n or np.any(p[:, 0] == p[:, 1])):
        raise InputError(f"pairs: need distinct node indices in 0..{n - 1}")
    return p[:, 0], p[:, 1]


def pair_statistics(csd: np.ndarray, freqs: np.ndarray, pairs) -> PairStatistics:
    """Per-epoch statistics of node pairs from complex cross-spectra.

    Parameters
    ----------
    csd : ndarray, shape (n_epochs, n_bins, n_nodes, n_nodes), complex
        Per-epoch, per-bin cross-spectra (e.g. :func:`sourcelab.spectra.epoch_bin_cross_spectra`,
        or ROI cross-spectra ``W C Wᵀ``).
    freqs : ndarray, shape (n_bins,)
        Hz.
    pairs : sequence of (int, int) or ndarray, shape (n_pairs, 2)
        Node indices ``(a, b)``, ``a != b``.

    Returns
    -------
    PairStatistics
        Per-epoch pair statistics, shape (n_epochs, n_bins, n_pairs), and node powers.
    """
    csd = np.asarray(csd)
    if csd.ndim != 4 or csd.shape[-1] != csd.shape[-2]:
        raise InputError(f"csd: need shape (n_epochs, n_bins, n, n), got {csd.shape}")
    if not np.iscomplexobj(csd):
        raise InputError("csd: need complex cross-spectra (epoch_bin_cross_spectra)")
    if np.shape(freqs) != (csd.shape[1],):
        raise InputError(f"freqs: need shape ({csd.shape[1]},), got {np.shape(freqs)}")
    ia, ib = _check_pairs(pairs, csd.shape[-1])
    return _statistics(csd[..., ia, ib], np.einsum("efnn->efn", csd).real, ia, ib, freqs)


def pair_statistics_from_fourier(spec: np.ndarray, freqs: np.ndarray, pairs) -> PairStatistics:
    """As :func:`pair_statistics`, from the epochs' Fourier coefficients.

    With one Welch segment per epoch, each epoch's cross-spectrum is the rank-one ``X Xᴴ``
    (:func:`sourcelab.spectra.epoch_bin_cross_spectra`), so pair statistics need only
    ``X_a conj(X_b)``: identical numbers without forming the n x n matrices.

    Parameters
    ----------
    spec : ndarray, shape (n_epochs, n_nodes, n_bins), complex
        Scaled coefficients (:func:`sourcelab.spectra.epoch_fourier`), or ROI coefficients
        ``W X``.
    freqs : ndarray, shape (n_bins,)
        Hz.
    pairs : ndarray of int, shape (n_pairs, 2)
        Node indices ``(a, b)`` of each pair.

    Returns
    -------
    PairStatistics
        Per-epoch statistics as float32, shape (n_epochs, n_bins, n_pairs), and node power
        ``|X|²``, shape (n_epochs, n_bins, n_nodes) (µV²/Hz for sensor coefficients).
    """
    spec = np.asarray(spec)
    if spec.ndim != 3 or not np.iscomplexobj(spec):
        raise InputError(f"spec: need complex shape (n_epochs, n_nodes, n_bins), got {spec.shape}")
    if np.shape(freqs) != (spec.shape[2],):
        raise InputError(f"freqs: need shape ({spec.shape[2]},), got {np.shape(freqs)}")
    ia, ib = _check_pairs(pairs, spec.shape[1])
    xt = spec.transpose(0, 2, 1)  # (n_ep, n_bins, n_nodes)
    xr = np.ascontiguousarray(xt.real, dtype=np.float32)
    xi = np.ascontiguousarray(xt.imag, dtype=np.float32)
    power = xr * xr + xi * xi
    return PairStatistics(
        stored=None,
        coef=(xr, xi),
        power=power,
        ia=ia,
        ib=ib,
        freqs=np.asarray(freqs, dtype=float),
    )


def bin_measures(
    acc: dict,
    power: np.ndarray,
    ia: np.ndarray,
    ib: np.ndarray,
    n_epochs: int,
    measures=BIN_MEASURES,
) -> dict[str, np.ndarray]:
    """Per-bin coupling measures from accumulated statistics.

    Parameters
    ----------
    acc : dict
        From :meth:`PairStatistics.accumulate`: name -> shape (n_rep, n_bins, n_pairs).
    power : ndarray, shape (n_rep, n_bins, n_nodes)
    ia, ib : ndarray of int, shape (n_pairs,)
    n_epochs : int
        Number of epochs ``K`` (the debiased wPLI's correction).
    measures : sequence of str
        Subset of :data:`BIN_MEASURES`, plus ``"cross_parts"``: the real and imaginary parts
        of the mean cross-spectrum, returned as ``"cross_re"`` and ``"cross_im"`` (what the
        phase and lag band measures read).

    Returns
    -------
    dict
        measure -> ndarray, shape (n_rep, n_bins, n_pairs); NaN where a denominator vanishes.
    """
    out = {}
    k = float(n_epochs)
    pp = (
        np.take(power, ia, axis=-1) * np.take(power, ib, axis=-1)
        if {"msc", "imcoh", "lagcoh"} & set(measures)
        else None
    )
    squares: dict = {}

    def sq2(name):  # each statistic's square made once (the same numbers as acc[name] ** 2)
        if name not in squares:
            squares[name] = acc[name] ** 2
        return squares[name]

    with np.errstate(invalid="ignore", divide="ignore"):
        for m in measures:
            if m == "msc":
                out[m] = (sq2("re") + sq2("im")) / pp
            elif m == "imcoh":
                out[m] = acc["im"] / np.sqrt(pp)
            elif m == "lagcoh":
                out[m] = sq2("im") / (pp - sq2("re"))
            elif m == "wpli":
                out[m] = np.abs(acc["im"]) / acc["abs_im"]
            elif m == "wpli2_debiased":
                sq = acc["sq_im"] / k
                out[m] = (sq2("im") - sq) / (sq2("abs_im") - sq)
            elif m == "lps":
                out[m] = sq2("u_im") / (1.0 - sq2("u_re"))
            elif m == "plv":
                out[m] = np.sqrt(sq2("u_re") + sq2("u_im"))
            elif m == "cross_parts":  # the mean cross-spectrum's parts, as they are
                out["cross_re"], out["cross_im"] = acc["re"], acc["im"]
            else:
                raise InputError(f"measure: {m!r} is not one of {BIN_MEASURES}")
    return out


def band_matrix(freqs: np.ndarray, band_idx) -> np.ndarray:
    """Averaging matrix, shape (n_bins, n_bands): ``1/n_b`` for the bins of band ``b``.

    Parameters
    ----------
    freqs : ndarray, shape (n_bins,)
        Bin frequencies, Hz (only their number is used).
    band_idx : sequence of int arrays, length n_bands
        Bins of each band (:func:`sourcelab.spectra.band_bin_indices`).

    Returns
    -------
    ndarray, shape (n_bins, n_bands)
        ``per_bin @ A`` averages per-bin values over each band.

    Raises
    ------
    InputError
        If a band has no bin.
    """
    a = np.zeros((len(freqs), len(band_idx)))
    for b, idx in enumerate(band_idx):
        if len(idx) == 0:
            raise InputError(f"band {b} has no frequency bin")
        a[idx, b] = 1.0 / len(idx)
    return a


@fill_doc
def band_measures(
    per_bin: dict[str, np.ndarray], freqs: np.ndarray, band_idx, measures=BAND_MEASURES
) -> dict[str, np.ndarray]:
    """Band values: per-bin measures averaged over each band's bins, plus phase and lag.

    Parameters
    ----------
    per_bin : dict
        From :func:`bin_measures` (with ``"cross_parts"`` and ``"plv"`` for the phase
        measures).
    freqs : ndarray, shape (n_bins,)
        Hz.
    band_idx : sequence of int arrays
        Bins of each band (:func:`sourcelab.spectra.band_bin_indices`).
    %(band_measures_subset)s

    Returns
    -------
    dict
        measure -> ndarray, shape (n_rep, n_bands, n_pairs).
    """
    f = np.asarray(freqs, dtype=float)
    band_matrix(f, band_idx)  # validates: no empty band
    # a band's bins as a slice where they are contiguous (the usual case): summing a slice of
    # the (r, f, p) array reads memory in order, several times faster than a matrix product
    sel = [
        slice(int(i[0]), int(i[-1]) + 1) if np.all(np.diff(i) == 1) else np.asarray(i)
        for i in band_idx
    ]
    avg, sums = True, False

    def over_bins(x, mean):  # (r, f, p) -> (r, b, p)
        out = np.empty((x.shape[0], len(sel), x.shape[2]), dtype=x.dtype)
        for b, s in enumerate(sel):
            out[:, b] = x[:, s].sum(axis=1)
            if mean:
                out[:, b] /= len(band_idx[b])
        return out

    out = {}
    with np.errstate(invalid="ignore", divide="ignore"):
        for m in measures:
            if m in ("msc", "imcoh", "lagcoh", "wpli", "wpli2_debiased", "lps"):
                out[m] = over_bins(per_bin[m], avg)
            elif m == "phase_deg":
                re, im = per_bin["cross_re"], per_bin["cross_im"]
                out[m] = np.degrees(np.arctan2(over_bins(im, sums), over_bins(re, sums)))
            elif m == "lag_ms":
                re, im = per_bin["cross_re"], per_bin["cross_im"]
                # |c| of c = re + i im filled in place (numpy's complex absolute value, whose
                # rounding np.hypot does not share); its angle is arctan2 of the parts, as
                # np.angle computes it
                c = np.empty(re.shape, dtype=np.result_type(re.dtype, np.complex64))
                c.real, c.imag = re, im
                mag = np.abs(c)
                del c
                lag = np.arctan2(im, re) / (2.0 * np.pi * f[None, :, None]) * 1e3
                out[m] = over_bins(mag * lag, sums) / over_bins(mag, sums)
            elif m == "phase_sd_deg":
                plv = np.clip(per_bin["plv"], 1e-12, 1.0)
                out[m] = over_bins(np.degrees(np.sqrt(-2.0 * np.log(plv))), avg)
            else:
                raise InputError(f"measure: {m!r} is not one of {BAND_MEASURES}")
    return out


def _bin_names(measures) -> tuple[tuple[str, ...], tuple[str, ...]]:
    bins = set()
    for m in measures:
        if m in ("phase_deg", "lag_ms"):
            bins.add("cross_parts")
        elif m == "phase_sd_deg":
            bins.add("plv")
        else:
            bins.add(m)
    stats = sorted({s for m in measures for s in _NEEDS[m]}, key=STAT_NAMES.index)
    return tuple(sorted(bins)), tuple(stats)


@fill_doc
def coupling_from_statistics(
    ps: PairStatistics,
    band_idx,
    weights: np.ndarray | None = None,
    *,
    signs: np.ndarray | None = None,
    chunk: int = 100,
    measures=BAND_MEASURES,
) -> dict[str, np.ndarray]:
    """Band measures of the estimate, or of bootstrap / randomisation replicates (chunked).

    Parameters
    ----------
    ps : PairStatistics
    band_idx : sequence of int arrays
    weights : ndarray, shape (n_rep, n_epochs), optional
        Bootstrap weights; default the estimate (one replicate).
    signs : ndarray, shape (n_rep, n_epochs), optional
        Conjugation signs (see :meth:`PairStatistics.accumulate`).
    chunk : int
        Replicates per pass (bounds memory: chunk x n_stats x n_bins x n_pairs floats); within a
        pass the per-bin formulas run on groups of replicates of :data:`_POST_BYTES` per
        statistic (cache-sized; the same numbers).
    %(band_measures_subset)s

    Returns
    -------
    dict
        measure -> ndarray, shape (n_rep, n_bands, n_pairs).
    """
    bin_names, stat_names = _bin_names(measures)
    rows = weights if weights is not None else signs

    def one(w=None, s=None):
        acc, pw = ps.accumulate(w, signs=s, names=stat_names)
        n_rep = max(x.shape[0] for x in (pw, *acc.values()))
        # the per-bin formulas and band averages are elementwise per replicate: a few replicates
        # at a time keep their temporaries in cache (the same numbers as all at once)
        step = max(1, _POST_BYTES // (4 * max(1, pw.shape[1] * ps.ia.size)))
        parts = []
        for r0 in range(0, n_rep, step):

            def sub(x, r0=r0):  # a leading axis of 1 broadcasts (conjugation signs)
                return x if x.shape[0] == 1 else x[r0 : r0 + step]

            pb = bin_measures(
                {n: sub(x) for n, x in acc.items()},
                sub(pw),
                ps.ia,
                ps.ib,
                ps.n_epochs,
                measures=bin_names,
            )
            parts.append(band_measures(pb, ps.freqs, band_idx, measures=measures))
            del pb
        if len(parts) == 1:
            return parts[0]
        return {m: np.concatenate([p[m] for p in parts], axis=0) for m in measures}

    if rows is None:
        return one()
    parts = [
        one(weights[s : s + chunk]) if weights is not None else one(s=signs[s : s + chunk])
        for s in range(0, rows.shape[0], chunk)
    ]
    return {m: np.concatenate([p[m] for p in parts], axis=0) for m in measures}


def conjugation_signs(n_epochs: int, *, n_rep: int = 500, seed: int = 0) -> np.ndarray:
    """Random ±1 per epoch and replicate for the conjugation (time-reversal) null.

    Parameters
    ----------
    n_epochs : int
        Number of epochs.
    n_rep : int
        Number of null replicates.
    seed : int
        Seed of :func:`numpy.random.default_rng`.

    Returns
    -------
    ndarray, shape (n_rep, n_epochs), float32
        Each entry -1 or +1 with probability 1/2.
    """
    rng = np.random.default_rng(seed)
    return rng.choice(np.array([-1.0, 1.0], dtype=np.float32), size=(int(n_rep), int(n_epochs)))


def bootstrap_weights(n_epochs: int, *, n_boot: int = 1000, seed: int = 0) -> np.ndarray:
    """Epoch weights of bootstrap replicates: multinomial counts / n_epochs, shape (n_boot, n_ep).

    The same draw as :func:`sourcelab.trust.bootstrap.bootstrap_weights` for the same seed, so
    band-power and coupling intervals resample the same epochs (the first ``n_boot`` of them when
    the counts differ).  The array is cached and read-only.

    Parameters
    ----------
    n_epochs : int
        Number of clean epochs, >= 2.
    n_boot : int
        Number of bootstrap replicates, >= 10.
    seed : int
        Seed of :func:`numpy.random.default_rng`.

    Returns
    -------
    ndarray, shape (n_boot, n_epochs)
        Each row sums to 1.

    Raises
    ------
    InputError
        For fewer than 2 epochs or 10 replicates.
    """
    if int(n_epochs) < 2:
        raise InputError(f"bootstrap: need at least 2 clean epochs, got {n_epochs}")
    if int(n_boot) < 10:
        raise InputError(f"n_boot: need at least 10 bootstrap replicates, got {n_boot}")
    return _weights(int(n_epochs), int(n_boot), int(seed))


@functools.lru_cache(maxsize=8)
def _weights(n_epochs: int, n_boot: int, seed: int) -> np.ndarray:
    # one draw per analysis, shared by the pair table and every atlas (read-only)
    rng = np.random.default_rng(seed)
    counts = rng.multinomial(n_epochs, np.full(n_epochs, 1.0 / n_epochs), size=n_boot)
    w = counts / float(n_epochs)
    w.setflags(write=False)
    return w


def _quantile(x: np.ndarray, q):
    """Quantiles over axis 0; the slow NaN-aware path only where replicates hold NaN.

    ``method="weibull"``: the ``q``-quantile of ``B`` replicates sits at order statistic
    ``q (B + 1)``, so with ``(B + 1)(1 - ci)/2`` a whole number (e.g. B = 199 or 999 for 95 %)
    each end of a percentile interval is one replicate (Davison & Hinkley 1997, section 5.2;
    from memory).
    """
    x = np.asarray(x)
    # each element's replicates as one contiguous, sorted lane (NaN last): numpy's quantile then
    # partitions lanes that are already in order, and the order statistics - hence the
    # numbers - are those of the unsorted replicates; sorting contiguous lanes is several times
    # faster than partitioning strided ones at several order statistics
    lanes = np.moveaxis(x, 0, -1).astype(x.dtype, order="C")
    lanes.sort(axis=-1)
    bad = np.isnan(lanes[..., -1])
    out = np.quantile(
        lanes.astype(float, copy=False), q, axis=-1, method="weibull", overwrite_input=True
    )
    if bad.any():
        xf = np.asarray(x, dtype=float)
        out[..., bad] = np.nanquantile(xf[:, bad], q, axis=0, method="weibull")
    return out


def _wrap_deg(x: np.ndarray) -> np.ndarray:
    return (np.asarray(x) + 180.0) % 360.0 - 180.0


def bootstrap_intervals(
    ps: PairStatistics,
    band_idx,
    estimate: dict[str, np.ndarray],
    *,
    n_boot: int = 1000,
    seed: int = 0,
    ci: float = 0.95,
    chunk: int = 100,
    measures=BAND_MEASURES,
) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Percentile bootstrap intervals over epochs for every band measure.

    Each replicate resamples the clean epochs with replacement (:func:`bootstrap_weights`) and
    recomputes every per-bin measure and band value from the resampled statistics, exactly.
    ``phase_deg`` is circular: its replicates are unwrapped around the estimate before taking
    percentiles.  Debiased wPLI² uses ``K`` = the number of epochs drawn.

    Parameters
    ----------
    ps : PairStatistics
    band_idx : sequence of int arrays
    estimate : dict
        The estimate's band measures (from :func:`coupling_from_statistics`), shape
        (1, n_bands, n_pairs) each.
    n_boot : int
        Bootstrap replicates.
    seed : int
        Seed (the same draw as the band-power bootstrap).
    ci : float
        Coverage of the percentile interval, e.g. 0.95.
    chunk : int
        Replicates per pass (memory only; see :func:`coupling_from_statistics`).
    measures : sequence of str
        Subset of :data:`BAND_MEASURES`.

    Returns
    -------
    dict
        measure -> (lo, hi), each ndarray, shape (n_bands, n_pairs).

    References
    ----------
    Efron B, Tibshirani RJ (1993).  An Introduction to the Bootstrap, ch. 13 (from memory).
    """
    if not 0.0 < ci < 1.0:
        raise InputError(f"ci: need a coverage in (0, 1), got {ci!r}")
    w = bootstrap_weights(ps.n_epochs, n_boot=n_boot, seed=seed)
    reps = coupling_from_statistics(ps, band_idx, w, chunk=chunk, measures=measures)
    q = [(1.0 - ci) / 2.0, (1.0 + ci) / 2.0]
    names = list(reps)
    for m in names:
        if m == "phase_deg":  # replicates unwrapped around the estimate
            reps[m] = _wrap_deg(reps[m] - estimate[m][0][None])
    # every measure's quantiles in one call (per element: the same numbers as one at a time)
    ends = _quantile(np.stack([reps[m] for m in names], axis=1), q)  # (2, n_meas, ...)
    out = {}
    for i, m in enumerate(names):
        lo, hi = ends[0, i], ends[1, i]
        if m == "phase_deg":
            est = estimate[m][0]
            lo, hi = est + lo, est + hi
        out[m] = (lo, hi)
    return out


def _gram(xb: np.ndarray) -> np.ndarray:
    """``Σ_e x_e(f) x_e(f')`` of a band's bins, shape (n_pairs, n_b, n_b), float64.

    ``xb``: one statistic at the band's bins, shape (n_epochs, n_b, n_pairs).
    """
    xb = np.ascontiguousarray(xb.transpose(2, 1, 0))  # (P, n_b, K)
    return np.matmul(xb, xb.transpose(0, 2, 1)).astype(float)


def _gram_pair_major(yb: np.ndarray) -> np.ndarray:
    """:func:`_gram` of the same statistic held pair-major, ``yb`` shape (n_pairs, n_epochs, n_b).

    ``Yᵀ Y`` per pair: numpy hands ``A Aᵀ`` and ``Aᵀ A`` of one buffer alike to BLAS ``syrk``,
    which packs the same panels either way, so the numbers are those of :func:`_gram`
    (checked bit for bit on the benchmark recording's tables).
    """
    yb = np.ascontiguousarray(yb)
    return np.matmul(yb.transpose(0, 2, 1), yb).astype(float)


def _quadratic_quantile(gram: np.ndarray, dvec: np.ndarray, level: float) -> tuple:
    """Mean and ``level`` quantile of ``Σ_f d_f A_f²`` with ``A ~ N(0, gram)``.

    Pearson's three-moment approximation: a shifted, scaled chi-square ``a χ²_h + b`` with the
    exact mean ``Σλ``, variance ``2Σλ²`` and third cumulant ``8Σλ³`` (``λ`` the eigenvalues of
    ``D^½ Σ D^½``); Pearson ES (1959) Biometrika 46:364 (from memory).  The power sums of the
    eigenvalues are traces, ``Σλ^j = tr(M^j)`` for the symmetric positive semi-definite ``M``, so
    no eigendecomposition is needed (the same numbers to rounding, ~10x faster).
    """
    from scipy.special import gammaincinv

    sd = np.sqrt(np.clip(dvec, 0.0, None))
    m = sd[:, :, None] * gram * sd[:, None, :]
    k1 = np.einsum("pff->p", m)
    k2 = 2.0 * np.einsum("pfg,pfg->p", m, m)
    k3 = 8.0 * np.einsum("pfg,pfg->p", np.matmul(m, m), m)
    with np.errstate(invalid="ignore", divide="ignore"):
        h = 8.0 * k2**3 / k3**2
        a = k3 / (4.0 * k2)
        q = a * (2 * gammaincinv(h / 2, level)) + (k1 - a * h)
    return k1, np.where(k1 > 0, q, 0.0)


def _analytic_null(ps: PairStatistics, band_idx, level: float, measures) -> dict:
    from scipy.special import gammaincinv, ndtri

    k = float(ps.n_epochs)
    want = set(measures)
    names = sorted({s for m in want for s in _NEEDS[m]} | {"re", "u_re"}, key=STAT_NAMES.index)
    acc, pw = ps.accumulate(names=names)
    a = {n: v[0] for n, v in acc.items()}  # (n_bins, P)
    pp = pw[0][:, ps.ia] * pw[0][:, ps.ib]
    z = ndtri(0.5 + level / 2.0)
    out = {m: ([], []) for m in LAGGED_MEASURES if m in want}
    grams = ps.grams(("im", "u_im") if "lps" in want else ("im",), band_idx)
    for b, idx in enumerate(band_idx):
        nb = len(idx)
        gx = grams["im"][b] / k**2  # cov of A_im
        gu = grams["u_im"][b] / k**2 if "u_im" in grams else None  # cov of U_im
        with np.errstate(invalid="ignore", divide="ignore"):
            if "imcoh" in want:  # linear in A_im
                c = (1.0 / np.sqrt(pp[idx])).T / nb  # (P, n_b)
                var = np.einsum("pf,pfg,pg->p", c, gx, c)
                out["imcoh"][0].append(np.zeros_like(var))
                out["imcoh"][1].append(z * np.sqrt(var))
            # lagcoh and lps: quadratic forms
            if "lagcoh" in want:
                d = (1.0 / (pp[idx] - a["re"][idx] ** 2)).T / nb
                mq = _quadratic_quantile(gx, d, level)
                out["lagcoh"][0].append(mq[0])
                out["lagcoh"][1].append(mq[1])
            if "lps" in want:
                d = (1.0 / (1.0 - a["u_re"][idx] ** 2)).T / nb
                mq = _quadratic_quantile(gu, d, level)
                out["lps"][0].append(mq[0])
                out["lps"][1].append(mq[1])
            if "wpli2_debiased" in want:  # quadratic form minus its exact mean
                den = (a["abs_im"][idx] ** 2 - a["sq_im"][idx] / k).T  # (P, n_b)
                d = 1.0 / den / nb
                mq = _quadratic_quantile(gx, d, level)
                shift = np.sum(a["sq_im"][idx].T / k * d, axis=1)
                out["wpli2_debiased"][0].append(mq[0] - shift)
                out["wpli2_debiased"][1].append(mq[1] - shift)
            if "wpli" in want:  # mean of |Gaussian| / A_abs; gamma with exact mean and variance
                sig = np.sqrt(np.einsum("pff->pf", gx))
                rho = np.clip(gx / (sig[:, :, None] * sig[:, None, :]), -1.0, 1.0)
                cab = (
                    (2.0 / np.pi)
                    * sig[:, :, None]
                    * sig[:, None, :]
                    * (np.sqrt(1.0 - rho**2) + rho * np.arcsin(rho) - 1.0)
                )
                wgt = (1.0 / a["abs_im"][idx]).T / nb
                mean = np.sqrt(2.0 / np.pi) * np.sum(wgt * sig, axis=1)
                var = np.einsum("pf,pfg,pg->p", wgt, cab, wgt)
                shape, scale = mean**2 / var, var / mean
                out["wpli"][0].append(mean)
                out["wpli"][1].append(scale * gammaincinv(shape, level))
    return {m: (np.stack(v[0]), np.stack(v[1])) for m, v in out.items()}


def conjugation_null(
    ps: PairStatistics,
    band_idx,
    *,
    method: str = "analytic",
    n_rep: int = 500,
    seed: int = 0,
    level: float = 0.95,
    chunk: int = 100,
    measures=LAGGED_MEASURES,
) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Null distribution of the lagged measures under instantaneous mixing only.

    Instantaneous (zero-lag) linear mixing of independent, stationary sources - volume
    conduction, the leakage of an inverse, a common reference - makes the expected
    cross-spectrum real and the distribution of every epoch's cross-spectrum symmetric under
    complex conjugation (conjugation = time reversal of the epoch, which leaves independent
    Gaussian sources and any instantaneous mixture of them unchanged in distribution).  Lagged
    coupling breaks that symmetry.  Conjugating a random subset of epochs (random signs
    ``ε_e`` on ``Im S`` and ``Im u``, keeping ``Re S``, ``|Im S|``, ``(Im S)²`` and the powers)
    therefore draws from the null distribution of each lagged measure *given the observed
    zero-lag structure*: a randomisation test of "lagged coupling beyond what mixing alone
    produces".

    ``method="monte-carlo"`` draws ``n_rep`` sign vectors.  ``method="analytic"`` (default, about
    100 times cheaper) uses that the randomised ``A_im = Σ ε_e Im S_e / K`` is a sum of many
    independent terms, hence close to Gaussian with the exact covariance
    ``Σ_e Im S_e(f) Im S_e(f') / K²`` across a band's bins: ``imcoh`` is then Gaussian (quantile
    of ``|imcoh|``: ``z_{(1+level)/2}`` SDs); ``lagcoh``, ``lps`` and ``wpli2_debiased`` are
    quadratic forms, summarised by a shifted scaled chi-square with their exact first three
    cumulants (Pearson 1959); ``wpli`` averages ``|Gaussian|`` terms, summarised by a gamma
    distribution with exact mean and variance (``E|X||Y|`` of a bivariate normal, from memory).
    The means are exact; debiased wPLI²'s null mean is 0 by construction.

    Parameters
    ----------
    ps : PairStatistics
    band_idx : sequence of int arrays
    method : {"analytic", "monte-carlo"}
    n_rep : int
        Monte-Carlo replicates.
    seed : int
    level : float
        Quantile reported as the null threshold.
    chunk : int
        Monte-Carlo replicates per pass (memory only; see :func:`coupling_from_statistics`).
    measures : sequence of str
        The lagged measures wanted (others of the sequence are ignored).

    Returns
    -------
    dict
        For each wanted measure of :data:`LAGGED_MEASURES`: (mean, quantile), each ndarray, shape
        (n_bands, n_pairs).  For the signed ``imcoh`` the quantile is of ``|imcoh|``.

    References
    ----------
    Haufe S, Nikulin VV, Müller KR, Nolte G (2013).  A critical assessment of connectivity
    measures for EEG data: a simulation study.  NeuroImage 64:120-133 (time reversal as a test
    of true interaction; from memory).
    Winkler I, Panknin D, Bartz D, Müller KR, Haufe S (2016).  Validity of time reversal for
    testing Granger causality.  IEEE Trans Signal Process 64:2746-2760 (from memory).
    Nolte G et al. (2004).  Clin Neurophysiol 115:2292-2307 (the imaginary part of coherency
    vanishes for instantaneous mixing).
    Pearson ES (1959).  Note on an approximation to the distribution of non-central χ².
    Biometrika 46:364 (three-moment chi-square approximation; from memory).
    """
    lagged = tuple(m for m in LAGGED_MEASURES if m in measures)
    if method == "analytic":
        return _analytic_null(ps, band_idx, level, lagged)
    if method != "monte-carlo":
        raise InputError(f"method: {method!r} is not one of analytic, monte-carlo")
    signs = conjugation_signs(ps.n_epochs, n_rep=n_rep, seed=seed)
    reps = coupling_from_statistics(ps, band_idx, signs=signs, chunk=chunk, measures=lagged)
    out = {}
    for m in lagged:
        r = reps[m]
        mag = np.abs(r) if m == "imcoh" else r
        out[m] = (np.mean(r, axis=0), _quantile(mag, level))
    return out


@dataclass(frozen=True, eq=False)
class CouplingResult:
    """What pair and edge coupling share: band values, their null and intervals.

    Attributes
    ----------
    band_names : tuple of str
    values : dict
        measure -> ndarray, shape (n_bands, n_pairs) (electrode pairs or ROI edges).
    null : dict
        lagged measure (edges: also ``"aec_orth"``) -> (expected, q95) under leakage or
        volume conduction alone, each shape (n_bands, n_pairs).
    leakage_msc : ndarray, shape (n_pairs,) or None
        Magnitude-squared coherence of the volume-conduction model (frequency-independent).
    intervals : dict
        measure -> (lo, hi), each shape (n_bands, n_pairs); empty without a bootstrap.
    n_epochs : int
        Clean epochs behind the values.
    """

    band_names: tuple[str, ...]
    values: dict
    null: dict
    leakage_msc: np.ndarray | None
    intervals: dict
    n_epochs: int


@fill_doc
def band_coupling(
    ps: PairStatistics,
    band_idx,
    *,
    measures=BAND_MEASURES,
    null_method: str | None = "analytic",
    n_null: int = 500,
    n_boot: int = 0,
    seed: int = 0,
    ci: float = 0.95,
) -> tuple[dict, dict, dict]:
    """Band measures of all epochs with their conjugation null and bootstrap intervals.

    One band at a time, from that band's bins only (:meth:`PairStatistics.select_bins`): the
    same numbers as all bins at once, with the per-epoch statistics of the widest band, not of
    all bins, held at once (this step is the peak memory of a tables-only analysis).  The
    bootstrap takes as many replicates per pass as fit :data:`_BLOCK_BYTES` per statistic.

    The shared step of electrode pairs (:func:`sourcelab.coupling.sensor.sensor_coupling`) and
    ROI edges (:func:`sourcelab.coupling.source.edge_coupling`).

    Parameters
    ----------
    ps : PairStatistics
    band_idx : sequence of int arrays
        Bins of each band (:func:`sourcelab.spectra.band_bin_indices`).
    measures : sequence of str
        Subset of :data:`BAND_MEASURES`.
    %(coupling_uncertainty)s

    Returns
    -------
    values : dict
        measure -> ndarray, shape (n_bands, n_pairs).
    null : dict
        lagged measure -> (mean, q95), each shape (n_bands, n_pairs); empty without a null.
    intervals : dict
        measure -> (lo, hi), each shape (n_bands, n_pairs); empty without a bootstrap.
    """
    # one band at a time: every measure is per bin, so a band needs only its own bins' statistics
    # (the same numbers; the largest band's statistics, not all bins', are held at once)
    parts = []
    for idx in band_idx:
        sub = ps.select_bins(_bin_selection(idx))
        one = [np.arange(len(idx))]
        est = coupling_from_statistics(sub, one, measures=measures)
        null = {}
        if null_method:
            null = conjugation_null(
                sub, one, method=null_method, n_rep=n_null, seed=seed, measures=measures
            )
        intervals = {}
        if n_boot:
            # as many replicates per pass as fit _BLOCK_BYTES per statistic (usually all)
            chunk = max(1, _BOOT_BYTES // (4 * len(idx) * max(1, ps.ia.size)))
            intervals = bootstrap_intervals(
                sub, one, est, n_boot=n_boot, seed=seed, ci=ci, measures=measures, chunk=chunk
            )
        parts.append(({m: v[0] for m, v in est.items()}, null, intervals))
        del sub

    def stack(k, pair=False):
        keys = parts[0][k].keys()
        if pair:
            return {
                m: tuple(np.concatenate([p[k][m][i] for p in parts]) for i in range(2))
                for m in keys
            }
        return {m: np.concatenate([p[k][m] for p in parts]) for m in keys}

    return stack(0), stack(1, pair=True), stack(2, pair=True)


def _bin_selection(idx):
    """A band's bins as a slice where they are contiguous (the usual case), else the indices."""
    i = np.asarray(idx, dtype=np.int64)
    if i.size and np.all(np.diff(i) == 1):
        return slice(int(i[0]), int(i[-1]) + 1)
    return i
