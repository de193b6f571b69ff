"""Shared numpydoc fragments: one home for a parameter's description used by several functions.

In the style of MNE-Python's ``mne.utils.docs`` (``docdict`` and ``fill_doc``): a docstring
names a fragment as ``%(name)s`` on a line of its own, and :func:`fill_doc` replaces it with
:data:`docdict`'s text, indented to the docstring's own indentation.  A literal percent sign in a
docstring filled this way is written ``%%``.

This module imports nothing (bottom layer).
"""

from __future__ import annotations

#: Fragment name -> numpydoc text (first line unindented, the rest indented by four spaces).
docdict: dict[str, str] = {}

# ---------------------------------------------------------------------------------- threads
docdict["thread_limit"] = """\
n_threads : int
    Threads per pool; default :data:`~sourcelab.constants.BLAS_THREADS`.
user_api : {None, "blas", "openmp"}
    The pools limited: None every pool (BLAS and OpenMP), ``"blas"`` BLAS only."""

# ---------------------------------------------------------------------------------- outputs
docdict["write_options"] = """\
figures, report, exports : bool
    Write the figures, the HTML/PDF report, the source-map exports (``maps/``).
command : list of str or None
    The command line recorded in ``provenance.json``; None: ``sys.argv``.
progress : bool or None
    Stage progress on standard error; None: only when it is a terminal."""

# ------------------------------------------------------------------------------ file writers
#: The Returns section of a writer that returns the file it wrote.
docdict["returns_path"] = """\
Returns
-------
Path
    ``path``."""

# ------------------------------------------------------------------------------------ norms
docdict["robust_clipping"] = """\
threshold : float
    Exclusion threshold in (robust) SDs (:data:`~sourcelab.norms.models.ROBUST_SD`).
max_iter : int
    Most sigma-clipping passes (:data:`~sourcelab.norms.models.ROBUST_MAX_ITER`)."""

# ------------------------------------------------------------------------------------ trust
#: The options of ``add_intervals`` and ``add_sensor_intervals`` (trust/bootstrap.py).
docdict["bootstrap_interval_options"] = """\
**options
    Keywords only, the bootstrap options below (an unknown one is a TypeError).
n_boot : int
    Bootstrap replicates (default 1,000).
seed : int
    Seed of the replicate draw (default 0): the same seed resamples the same epochs for ROI
    and sensor tables.
ci : float
    Interval coverage (default 0.95).
norm_rows : NormRows, optional
    The table's matched norms (:func:`sourcelab.norms.match_norms`); gives ``z_lo`` and
    ``z_hi``.  Without it they are NaN and ``robust`` is NA.
band_names : sequence of str, optional
    Band names in ``epoch_csd`` order (default: order of first appearance in the table,
    which is the pipeline's order).
z_threshold : float
    Deviation threshold for ``robust`` (default
    :data:`~sourcelab.constants.Z_THRESHOLD`, 1.96).
epoch_total : ndarray, shape (n_epochs, n_ch, n_ch), optional
    Per-epoch broadband cross-spectra (``AnalysisResult.epoch_total``), the denominator of
    relative power."""

# ----------------------------------------------------------------------------------- report
#: Parameters and Returns of the label look-ups (``column_label``, ``field_label``).
docdict["label_lookup"] = """\
Parameters
----------
name : object
    A column or field name (converted to ``str``).

Returns
-------
str
    Its entry in the table; a name not in it with underscores turned into spaces."""

# ---------------------------------------------------------------------------------- targets
#: The checks of a parsed target file (``target_from_dict``, ``coupling_target_from_dict``).
docdict["target_check"] = """\
path : str | Path
    Named in error messages.
current : Fingerprint, optional
    The pipeline to compare with; default the shipped head model's sha256 and this
    sourcelab's ``PIPELINE_VERSION``.
check_fingerprint : bool
    False skips the fingerprint comparison."""

docdict["live_filter_window"] = """\
sos : ndarray, shape (n_sections, 6)
    Second-order sections of the live band-pass filter.
sfreq : float
    Sampling rate, Hz.
window_s : float
    Live window length, s."""

# ---------------------------------------------------------------------------------- figures
docdict["figure_output"] = """\
dpi : int
    Resolution of the figure and of ``output_file``, dots per inch.
output_file : str | Path | None
    If given, the figure is also saved there (format from the extension)."""

#: The end of a figure function's Parameters section and its whole Returns section.
docdict["figure_output_returns"] = (
    docdict["figure_output"]
    + """

Returns
-------
fig : matplotlib.figure.Figure"""
)

#: The end of the Parameters section and the Returns section of a figure's PNG twin.
docdict["png_twin_returns"] = """\
**options
    The keywords of the figure function, but ``output_file``.

Returns
-------
bytes
    The PNG file's content."""

# ---------------------------------------------------------------------------- ages and power
docdict["age_years"] = """\
age : float
    Years, > 0."""

_SECTION = "Parameters\n----------\n"

#: The whole Parameters section of a model evaluated at one age.
docdict["age_parameters"] = _SECTION + docdict["age_years"]

#: The Parameters section of a function painting an atlas's ROIs on the source space.
docdict["atlas_parameters"] = (
    _SECTION
    + """\
atlas : Atlas
    ROIs whose ``vertices`` are source indices."""
)

docdict["epochs_sfreq"] = """\
epochs : ndarray, shape (n_epochs, n_channels, n_times)
    µV.
sfreq : float
    Sampling rate, Hz."""

#: Epochs and rate of the cross-spectral core (:mod:`sourcelab.spectra`, any data unit).
docdict["spectra_epochs_sfreq"] = """\
epochs : ndarray, shape (n_epochs, n_ch, n_times)
    Clean epochs, e.g. in µV (spectra come out in its square, e.g. µV²).
sfreq : float
    Sampling rate, Hz."""

#: The whole Parameters section of a band-power function of epochs.
docdict["band_power_parameters"] = (
    _SECTION
    + docdict["epochs_sfreq"]
    + """
bands : Bands | dict | sequence of (low, high)
    Hz, [low, high)."""
)

# --------------------------------------------------------------------------- inverse methods
docdict["method_orientation_lambda2"] = """\
method : {"sLORETA", "eLORETA", "dSPM"}
orientation : {"fixed", "free"}
lambda2 : float
    λ² = 1/SNR²."""

docdict["lambda2_fixed_sloreta"] = """\
lambda2 : float
    λ² of the fixed-orientation sLORETA operator (default 1/9, SNR 3)."""

# ------------------------------------------------------------------------------- reliability
#: The whole Parameters section of the two halves' reliabilities.
docdict["reliability_parameters"] = (
    _SECTION
    + """\
power : ndarray, shape (n_epochs, n_bands, n_items)
    Per-epoch band power (µV² or any power unit), epochs in time order.
threshold : float
    Flag bands whose uncorrected r is below this (``AnalysisConfig.reliability_threshold``).
log : bool
    Correlate log10 power (default) rather than power."""
)

# ------------------------------------------------------------------------- template matching
docdict["match_map_space_peak"] = """\
values : ndarray, shape (n_src,)
    Non-negative map (power or |z|).
space : CortexSpace
    Supplies the kernel, gain, mesh positions, hemispheres and area codes.
peak : int
    Source index of the peak."""

# ------------------------------------------------------------------------------ command line
#: The whole Parameters section of a sub-command's ``add_parser(sub)``.
docdict["cli_add_parser"] = (
    _SECTION
    + """\
sub : argparse._SubParsersAction
    The ``sourcelab`` parser's sub-parsers; every parser added dispatches to :func:`run`."""
)

#: The Parameters section of a sub-command's ``run(args)``.
docdict["cli_run_args"] = (
    _SECTION
    + """\
args : argparse.Namespace
    The parsed command line (see :func:`add_parser` for this sub-command's options)."""
)

#: The Returns section of a sub-command's ``run(args)``.
docdict["cli_run_returns"] = """\
Returns
-------
code : int
    Exit code 0 on success.  Bad input raises :class:`sourcelab.errors.InputError`, which the
    command line turns into one line and exit code 2."""

# ---------------------------------------------------------------------- candidate selection
docdict["max_n_include"] = """\
max_n : int, optional
    Keep the first ``max_n`` rows.
include : tuple of str, optional
    Atlases to rank (default: all in the table)."""

# ------------------------------------------------------------------------- source-map exports
docdict["source_map_measures"] = """\
measures : sequence of {"absolute", "relative", "z_absolute", "z_relative"}
    Absolute (standardised sLORETA) source power, relative power (fraction of total) or
    per-source z."""

docdict["file_prefix"] = """\
prefix : str
    Prepended to every file name."""


def _indent(text: str, indent: str) -> str:
    first, *rest = text.splitlines()
    return "\n".join([first] + [indent + line if line else line for line in rest])


def _indentation(doc: str) -> int:
    """Smallest indentation of the docstring's non-blank lines after the first."""
    widths = [len(line) - len(line.lstrip()) for line in doc.splitlines()[1:] if line.strip()]
    return min(widths, default=0)


def fill_doc(obj):
    """Fill the ``%(name)s`` fragments of ``obj.__doc__`` from :data:`docdict`.

    Parameters
    ----------
    obj : function or class
        Its docstring names fragments as ``%(name)s``, each at the start of a line.

    Returns
    -------
    obj
        The same object, its ``__doc__`` filled (unchanged when Python runs without
        docstrings, ``-OO``).

    Raises
    ------
    RuntimeError
        When the docstring names an unknown fragment or holds a lone ``%`` (at import time).
    """
    doc = obj.__doc__
    if not doc:
        return obj
    indent = " " * _indentation(doc)
    try:
        obj.__doc__ = doc % {name: _indent(text, indent) for name, text in docdict.items()}
    except (KeyError, TypeError, ValueError) as exc:
        raise RuntimeError(f"docstring of {obj.__qualname__}: cannot fill {exc}") from None
    return obj
