"""Descriptive names of Brodmann areas, and a natural sort for area names (BA1, BA2, ..., BA10).

The names are the usual anatomical descriptions of each cytoarchitectonic area: the gyrus or
cortex it occupies and, for the primary and secondary sensory and motor areas, that role.
Sources: Brodmann K (1909), Vergleichende Lokalisationslehre der Grosshirnrinde, Leipzig: Barth
(the areas and their locations); Zilles K, Amunts K (2010), Centenary of Brodmann's map -
conception and fate, Nat Rev Neurosci 11:139-145 (modern correspondence of areas and gyri).
The short wording is ours, from memory of those sources.
"""

from __future__ import annotations

import re

#: Brodmann area number -> short descriptive name.
BRODMANN_NAMES: dict[int, str] = {
    1: "primary somatosensory (postcentral)",
    2: "primary somatosensory (postcentral, posterior)",
    3: "primary somatosensory (central sulcus)",
    4: "primary motor",
    5: "superior parietal (anterior)",
    6: "premotor and supplementary motor",
    7: "superior parietal and precuneus",
    8: "caudal superior and middle frontal",
    9: "dorsolateral and medial prefrontal",
    10: "frontopolar",
    11: "orbitofrontal",
    12: "orbitofrontal (medial)",
    13: "insula",
    17: "primary visual",
    18: "secondary visual",
    19: "visual association",
    20: "inferior temporal",
    21: "middle temporal",
    22: "superior temporal",
    23: "posterior cingulate (ventral)",
    24: "anterior cingulate (ventral)",
    25: "subgenual cingulate",
    26: "ectosplenial",
    27: "presubiculum",
    28: "entorhinal (posterior)",
    29: "retrosplenial (granular)",
    30: "retrosplenial (agranular)",
    31: "posterior cingulate (dorsal)",
    32: "anterior cingulate (dorsal)",
    33: "pregenual cingulate",
    34: "entorhinal (anterior)",
    35: "perirhinal",
    36: "parahippocampal (ectorhinal)",
    37: "fusiform and occipitotemporal",
    38: "temporal pole",
    39: "angular gyrus",
    40: "supramarginal gyrus",
    41: "primary auditory",
    42: "secondary auditory",
    43: "subcentral (gustatory)",
    44: "inferior frontal, pars opercularis",
    45: "inferior frontal, pars triangularis",
    46: "dorsolateral prefrontal (middle frontal)",
    47: "inferior frontal, pars orbitalis",
    48: "retrosubicular",
}

_BA = re.compile(r"^\s*(?:BA|Brodmann area\s*)(\d+)\s*$", re.IGNORECASE)
_PARTS = re.compile(r"(\d+)")


def brodmann_number(name: str) -> int | None:
    """The area number of ``"BA17"`` (or ``"Brodmann area 17"``), else None.

    Parameters
    ----------
    name : str
        An ROI name (case-insensitive; surrounding spaces allowed).

    Returns
    -------
    int or None
        The number, or None for names that are not Brodmann areas.
    """
    m = _BA.match(str(name))
    return int(m.group(1)) if m else None


def area_name(roi: str) -> str:
    """The descriptive name of a Brodmann area (``"BA17"`` -> ``"primary visual"``), else ``""``.

    Parameters
    ----------
    roi : str
        An ROI name; names that are not Brodmann areas give the empty string.

    Returns
    -------
    str
        Entry of :data:`BRODMANN_NAMES`, or ``""`` (also for numbers it lacks).
    """
    n = brodmann_number(roi)
    return BRODMANN_NAMES.get(n, "") if n is not None else ""


def area_label(roi: str) -> str:
    """``"BA17 primary visual"`` for a Brodmann area; other names unchanged.

    Parameters
    ----------
    roi : str
        An ROI name.

    Returns
    -------
    str
        ``roi`` followed by its :func:`area_name`, or ``str(roi)`` when it has none.
    """
    name = area_name(roi)
    return f"{roi} {name}" if name else str(roi)


def natural_key(name) -> tuple:
    """Sort key that orders the numbers inside names by value: BA1, BA2, ..., BA10, BA11.

    Use as ``sorted(names, key=natural_key)`` or ``df.sort_values("roi", key=...)`` through
    :func:`natural_sort_series`.

    Parameters
    ----------
    name : object
        A name (converted to ``str``).

    Returns
    -------
    tuple of (int, int, str)
        One element per run of digits ``(0, value, "")`` or of other text
        ``(1, 0, lowercased)``; numbers sort before text at the same position.
    """
    parts = _PARTS.split(str(name))
    return tuple((0, int(p), "") if p.isdigit() else (1, 0, p.lower()) for p in parts if p != "")


def natural_sorted(names) -> list:
    """``names`` sorted with :func:`natural_key`.

    Parameters
    ----------
    names : iterable
        Names (any values; compared as strings).

    Returns
    -------
    list
        A new sorted list of the same values.
    """
    return sorted(names, key=natural_key)


def natural_sort_series(series):
    """Key function for :meth:`pandas.DataFrame.sort_values` (``key=natural_sort_series``).

    Parameters
    ----------
    series : pandas.Series
        The column being sorted.

    Returns
    -------
    pandas.Series of int
        Rank of each value in the natural order of the distinct values, same index.
    """
    import pandas as pd

    order = {v: i for i, v in enumerate(natural_sorted(dict.fromkeys(series)))}
    return pd.Series([order[v] for v in series], index=series.index)
