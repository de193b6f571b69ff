"""Data-quality figure: where the time went, which sites caused rejections, the clean spectra."""

from __future__ import annotations

from .clean import REASONS, CleanData
from .power import epoch_spectra


def plot_quality(clean: CleanData, *, figure=None, fmax: float = 45.0):
    """Three panels: time kept/rejected by reason, per-site kept fraction, log PSD per site.

    Parameters
    ----------
    clean : CleanData
        Cleaned recording: kept and rejected seconds by reason, per-site kept fraction and
        the clean epochs (µV) with their sampling rate.
    figure : matplotlib.figure.Figure | None
        Drawn into (cleared) when given; otherwise a new figure.
    fmax : float
        Upper frequency shown, Hz.

    Returns
    -------
    matplotlib.figure.Figure
        The figure with the three panels (time in s; PSD in µV²/Hz, mean over epochs; the
        PSD panel stays empty when no epoch was kept).
    """
    import matplotlib.pyplot as plt

    fig = figure if figure is not None else plt.figure(figsize=(11, 3.6))
    fig.clear()
    ax1, ax2, ax3 = fig.subplots(1, 3, gridspec_kw={"width_ratios": [1, 1.6, 1.6]})

    labels = ["kept"] + [r for r in REASONS if clean.rejected_s.get(r, 0) > 0]
    values = [clean.kept_s] + [clean.rejected_s[r] for r in labels[1:]]
    colours = ["0.25"] + ["0.7"] * (len(labels) - 1)
    ax1.barh(labels[::-1], values[::-1], color=colours[::-1])
    ax1.set_xlabel("time (s)")
    ax1.set_title("selected data")

    sites = list(clean.ch_names)
    ax2.bar(sites, [clean.channel_kept_fraction[s] for s in sites], color="0.4")
    ax2.set_ylim(0, 1)
    ax2.set_ylabel("fraction of epochs passing")
    ax2.set_title("per-site checks")
    ax2.tick_params(axis="x", labelrotation=90, labelsize=7)

    if len(clean.epochs):
        freqs, psd = epoch_spectra(clean.epochs, clean.sfreq)
        sel = (freqs > 0) & (freqs <= fmax)
        cmap = plt.get_cmap("viridis")
        for i, s in enumerate(sites):
            ax3.semilogy(
                freqs[sel], psd.mean(0)[i, sel], lw=0.8, color=cmap(i / (len(sites) - 1)), label=s
            )
        ax3.legend(fontsize=5, ncol=4, frameon=False)
    ax3.set_xlabel("frequency (Hz)")
    ax3.set_ylabel("PSD (µV²/Hz)")
    ax3.set_title(f"clean spectra ({len(clean.epochs)} epochs)")
    fig.tight_layout()
    return fig


__all__ = ["plot_quality"]
