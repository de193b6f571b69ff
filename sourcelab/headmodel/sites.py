"""The 19 10-20 electrode sites on the fsaverage scalp, as MNE objects (the one Info builder).

The positions come from MNE's fsaverage-fitted 10-20 montage
(``mne/channels/data/montages/fsaverage_1020.tsv``, built-in name ``"fsaverage_1020"``), not
from ``standard_1020`` (Colin27 positions, about 11 mm away from the fsaverage scalp).
"""

from __future__ import annotations

import functools

from ..constants import SITES_1020
from ..errors import InputError

#: Built-in MNE montage whose positions were fitted to the fsaverage scalp.
MONTAGE_NAME = "fsaverage_1020"


@functools.lru_cache(maxsize=1)
def _montage():
    import mne

    full = mne.channels.make_standard_montage(MONTAGE_NAME)
    missing = [s for s in SITES_1020 if s not in full.ch_names]
    if missing:  # would mean an incompatible MNE version
        raise RuntimeError(f"MNE montage {MONTAGE_NAME!r} lacks sites {missing}")
    pos = full.get_positions()
    return mne.channels.make_dig_montage(
        ch_pos={s: pos["ch_pos"][s] for s in SITES_1020},
        nasion=pos["nasion"],
        lpa=pos["lpa"],
        rpa=pos["rpa"],
        coord_frame="unknown",
    )


def fsaverage_montage():
    """MNE's fsaverage-fitted 10-20 montage restricted to :data:`~sourcelab.constants.SITES_1020`.

    Returns
    -------
    montage : mne.channels.DigMontage
        19 EEG positions plus the nasion and pre-auricular fiducials (metres); a copy.
    """
    return _montage().copy()


def make_info(sfreq: float, *, average_reference: bool = False):
    """``mne.Info`` for the 19 sites with the fsaverage-fitted montage set.

    Parameters
    ----------
    sfreq : float
        Sampling frequency, Hz (> 0).
    average_reference : bool
        Add the average-reference projector (needed by MNE's inverse routines).

    Returns
    -------
    info : mne.Info
        19 EEG channels named and ordered as :data:`~sourcelab.constants.SITES_1020`, positions
        in MNE head coordinates (metres).
    """
    import mne

    try:
        sfreq = float(sfreq)
    except (TypeError, ValueError):
        raise InputError(f"sfreq must be a positive number of Hz, got {sfreq!r}") from None
    if not sfreq > 0:
        raise InputError(f"sfreq must be a positive number of Hz, got {sfreq!r}")
    info = mne.create_info(list(SITES_1020), sfreq, ch_types="eeg")
    info.set_montage(fsaverage_montage(), verbose="error")
    if average_reference:  # through a Raw: the public route to MNE's average-reference projector
        import numpy as np

        raw = mne.io.RawArray(np.zeros((len(SITES_1020), 1)), info, verbose="error")
        raw.set_eeg_reference("average", projection=True, verbose="error")
        info = raw.info
    return info


def positions_info(ch_names, ch_pos, *, sfreq: float = 250.0):
    """``mne.Info`` for EEG electrodes at given head-frame positions (simulated heads).

    Parameters
    ----------
    ch_names : sequence of str
        Channel names, one per row of ``ch_pos``.
    ch_pos : array-like, shape (n_ch, 3)
        Electrode positions, metres, MNE head coordinates.
    sfreq : float
        Sampling frequency, Hz (only stored; forward models do not depend on it).

    Returns
    -------
    info : mne.Info
        ``n_ch`` EEG channels with a head-frame montage of those positions (no fiducials).
    """
    import mne
    import numpy as np

    names = list(ch_names)
    info = mne.create_info(names, float(sfreq), ch_types="eeg")
    mont = mne.channels.make_dig_montage(
        ch_pos=dict(zip(names, np.asarray(ch_pos, dtype=float))), coord_frame="head"
    )
    info.set_montage(mont, verbose="error")
    return info
