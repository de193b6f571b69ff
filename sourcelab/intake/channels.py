"""Channel-name recognition: map the labels found in a recording onto the 19 canonical 10-20 sites.

Recognition is case-insensitive and tolerant of the common decorations amplifiers and converters
add: an ``EEG`` type prefix, a reference suffix (``-REF``, ``-LE``, ``-AV``, ``-A1``, ``-A1A2``,
``-M1`` ...), dots and spaces (``Fp1.``, ``FP 1``), and the old 10-20 temporal names
(T3 = T7, T4 = T8, T5 = P7, T6 = P8; American Clinical Neurophysiology Society guideline 2006,
J Clin Neurophysiol 23:107-110 — from memory).  Bipolar derivations such as ``Fp1-F7`` are *not*
taken as a site.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..constants import SITES_1020

#: Old 10-20 names -> modern names (common practice).
OLD_TO_NEW: dict[str, str] = {"t3": "T7", "t4": "T8", "t5": "P7", "t6": "P8"}

#: Reference suffix token (lower case, after the last '-') -> reference family.
REFERENCE_SUFFIXES: dict[str, str] = {
    "ref": "single site",
    "a1": "single site",
    "a2": "single site",
    "m1": "single site",
    "m2": "single site",
    "cz": "single site",
    "le": "linked ears",
    "a1a2": "linked ears",
    "a12": "linked ears",
    "m1m2": "linked ears",
    "lm": "linked ears",
    "linked": "linked ears",
    "av": "average",
    "avg": "average",
    "ave": "average",
    "car": "average",
}

_CANONICAL_LOWER = {s.lower(): s for s in SITES_1020}
_PREFIX = re.compile(r"^\s*(eeg)[\s_:\-]*", re.IGNORECASE)


@dataclass(frozen=True)
class ChannelMatch:
    """Result of matching a recording's labels to the 10-20 sites.

    Attributes
    ----------
    channel_map : dict
        Canonical site -> original label, in :data:`sourcelab.config.SITES_1020` order, for the
        sites found.
    missing : tuple of str
        Canonical sites with no matching label.
    duplicates : tuple of str
        Human-readable notes on sites claimed by more than one label (the first was kept).
    reference_hint : str
        ``"average"``, ``"linked ears"``, ``"single site"`` or ``"unknown"`` from the suffixes.
    """

    channel_map: dict
    missing: tuple[str, ...]
    duplicates: tuple[str, ...]
    reference_hint: str


def canonical_site(label: str) -> tuple[str | None, str | None]:
    """Canonical 10-20 site for one channel label, and the reference family its suffix names.

    Parameters
    ----------
    label : str
        Channel label as stored in the file, e.g. ``"EEG T3-REF"``.

    Returns
    -------
    site : str | None
        E.g. ``"T7"``; None when the label is not one of the 19 sites.
    reference : str | None
        Reference family named by the suffix (see :data:`REFERENCE_SUFFIXES`), or None.
    """
    s = _PREFIX.sub("", str(label)).strip()
    reference = None
    if "-" in s:
        head, _, tail = s.rpartition("-")
        token = re.sub(r"[\s._]", "", tail).lower()
        if token not in REFERENCE_SUFFIXES:
            return None, None  # a bipolar derivation or something else: not a site
        reference = REFERENCE_SUFFIXES[token]
        s = head
    key = re.sub(r"[\s._]", "", s).lower()
    if key in _CANONICAL_LOWER:
        return _CANONICAL_LOWER[key], reference
    if key in OLD_TO_NEW:
        return OLD_TO_NEW[key], reference
    return None, None


def match_channels(labels) -> ChannelMatch:
    """Match a list of channel labels to the 19 canonical sites.

    Parameters
    ----------
    labels : sequence of str
        Channel labels in file order.

    Returns
    -------
    ChannelMatch
        When two labels claim one site (``T3`` and ``T7``), an exact modern-name match wins,
        otherwise the first label; the clash is reported in ``duplicates``.
    """
    found: dict[str, str] = {}
    notes: list[str] = []
    refs: set[str] = set()
    for label in labels:
        site, ref = canonical_site(label)
        if site is None:
            continue
        if ref is not None:
            refs.add(ref)
        if site in found:
            prev = found[site]
            if canonical_site_is_exact(label, site) and not canonical_site_is_exact(prev, site):
                found[site] = label
                notes.append(f"{site}: kept {label!r}, ignored {prev!r}")
            else:
                notes.append(f"{site}: kept {prev!r}, ignored {label!r}")
            continue
        found[site] = label
    channel_map = {s: found[s] for s in SITES_1020 if s in found}
    missing = tuple(s for s in SITES_1020 if s not in found)
    hint = refs.pop() if len(refs) == 1 else "unknown"
    return ChannelMatch(channel_map, missing, tuple(notes), hint)


def canonical_site_is_exact(label: str, site: str) -> bool:
    """True when ``label`` spells ``site`` with its modern name (any case, any decoration).

    Parameters
    ----------
    label : str
        Channel label as stored in the file, e.g. ``"EEG T7-REF"``; the prefix and a reference
        suffix after the last ``-`` are ignored, as are spaces, dots and underscores.
    site : str
        Canonical 10-20 site (modern name), e.g. ``"T7"``.

    Returns
    -------
    bool
        False for an old name of the same site (``"T3"`` for ``"T7"``) or another site.
    """
    s = _PREFIX.sub("", str(label)).strip().rpartition("-")[0] or _PREFIX.sub("", str(label))
    return re.sub(r"[\s._]", "", s).lower() == site.lower()
