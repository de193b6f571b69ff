"""The demo: an invented participant and an invented reference cohort, simulated by sourcelab.

Scenario (entirely invented, no real person): "demo-01", a fictional 41-year-old adult, four
minutes of eyes-closed rest at 256 Hz.  The simulation plants an excess of theta (6 Hz) activity in
a left dorsolateral prefrontal patch (around MNI (-40, 30, 30), Brodmann areas 9/46) on top of the
normal posterior alpha that every member of the invented cohort has.  The demo norms come from 80
invented adults aged 18-65 simulated with between-person variability (log-normal generator
strengths, alpha frequency that slows with age, background power that falls with age, a
person-specific 1/f exponent of the background).
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np

from .simulate import Generator, simulate_raw

log = logging.getLogger("sourcelab")

DEMO_AGE = 41.0
DEMO_CONDITION = "eyes closed"
DEMO_SEED = 20261201
COHORT_SEED = 19291
#: The planted deviation: theta in the left dorsolateral prefrontal areas.
PLANTED = dict(rois=("BA8", "BA9", "BA46"), hemisphere="left", band="theta")
_PLANTED_CENTER = (-40.0, 30.0, 30.0)
#: Peak amplitude of the planted theta patch (same units as the other generators).
PLANTED_AMPLITUDE = 0.3

# Between-person variability of the invented people.  Targets (from memory, not fitted to any
# data set): adult between-person SD of log10 absolute band power about 0.2-0.3 and of logit
# relative power about 0.3-0.5 (John et al. 1980, Science 210:1255-1258; Gasser, Bächer & Möcks
# 1982, Electroencephalogr Clin Neurophysiol 53:119-124); SD of the aperiodic (1/f) exponent
# about 0.2 across adults (Donoghue et al. 2020, Nat Neurosci 23:1655-1665).  Amplitude SDs are
# in natural log; power SD is twice that (0.25 ln amplitude -> 0.22 log10 power).
#: ln-SD of the alpha generators' amplitude (shared by the four alpha patches of a person);
#: 0.25 -> 0.22 log10 in power (0.35 produced invented people whose every epoch exceeded the
#: 150 µV peak-to-peak rejection threshold).
ALPHA_LN_SD = 0.25
#: ln-SD of each theta and beta generator's amplitude.
RHYTHM_LN_SD = 0.3
#: ln-SD of the background RMS (0.25 -> 0.22 log10 in power).
BACKGROUND_LN_SD = 0.25
#: Mean and SD of the background's 1/f exponent.
EXPONENT_MEAN, EXPONENT_SD = 1.0, 0.2
#: Person-specific smooth changes of the background spectrum: ln-power gain SD at each centre
#: (Hz).  Without them a band's share of 1-45 Hz power barely differs between invented people
#: (measured: relative-power SDs 0.06-0.15 logit for theta and alpha, far below the 0.3-0.5
#: above); 0.5 was chosen to bring the median theta/alpha relative SD into that range while the
#: absolute SDs stay within 0.2-0.3 log10 (measured on a rebuilt cohort; see the report).
#: No centre above 20 Hz: a gain there makes 25-45 Hz background look like muscle to the
#: cleaning rule (measured: whole invented recordings rejected).
BAND_CENTRES_HZ = (2.0, 6.0, 10.0, 20.0)
BAND_LN_SD = 0.5


def _person_generators(rng: np.random.Generator, age: float) -> tuple[Generator, ...]:
    """Generators of one invented person: bilateral occipital alpha, frontal-midline theta,
    central beta; strengths log-normal across people, alpha frequency slowing with age."""
    alpha_f = 10.4 - 0.02 * (age - 18) + rng.normal(0, 0.4)
    a = np.exp(rng.normal(np.log(0.45), ALPHA_LN_SD))
    gens = [
        Generator((-18, -92, 4), "left", freq=alpha_f, amplitude=a * np.exp(rng.normal(0, 0.1))),
        Generator((20, -92, 4), "right", freq=alpha_f, amplitude=a * np.exp(rng.normal(0, 0.1))),
        Generator((-30, -70, 40), "left", freq=alpha_f, amplitude=0.5 * a),
        Generator((30, -70, 40), "right", freq=alpha_f, amplitude=0.5 * a),
        Generator(
            (-4, 40, 20), "left", freq=6.0, amplitude=np.exp(rng.normal(np.log(0.3), RHYTHM_LN_SD))
        ),
        Generator(
            (4, 40, 20), "right", freq=6.0, amplitude=np.exp(rng.normal(np.log(0.3), RHYTHM_LN_SD))
        ),
        Generator(
            (-38, -20, 55),
            "left",
            freq=18.0,
            bandwidth=6.0,
            amplitude=np.exp(rng.normal(np.log(0.25), RHYTHM_LN_SD)),
        ),
        Generator(
            (38, -20, 55),
            "right",
            freq=18.0,
            bandwidth=6.0,
            amplitude=np.exp(rng.normal(np.log(0.25), RHYTHM_LN_SD)),
        ),
    ]
    return tuple(gens)


def _person_background(rng: np.random.Generator, age: float) -> float:
    return float(np.exp(rng.normal(np.log(10.0) - 0.004 * (age - 18), BACKGROUND_LN_SD)))


def simulate_person(
    rng: np.random.Generator, age: float, *, duration_s: float, extra: tuple[Generator, ...] = ()
):
    """One invented person's recording as an ``mne.io.RawArray``.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of the person's variability (generator strengths, alpha frequency, background
        level, 1/f exponent and spectral shape) and of the simulated signals; advanced in place.
    age : float
        Age of the invented person, years (alpha slows and background power falls with age).
    duration_s : float
        Length of the recording, s.
    extra : tuple of sourcelab.simulate.Generator
        Generators added to the person's own (e.g. the planted theta patch).

    Returns
    -------
    raw : mne.io.RawArray
        The 19 10-20 sites at 256 Hz.
    """
    from .headmodel import load_head_model

    gens = _person_generators(rng, age) + tuple(extra)
    background = _person_background(rng, age)
    exponent = float(np.clip(rng.normal(EXPONENT_MEAN, EXPONENT_SD), 0.4, 1.8))
    # shape changes, not scale changes: centred across the centres (the overall scale varies
    # through the background and generators already), SD BAND_LN_SD at each centre
    g = rng.normal(0.0, BAND_LN_SD / np.sqrt(1 - 1 / len(BAND_CENTRES_HZ)), len(BAND_CENTRES_HZ))
    shape = tuple((c, float(x)) for c, x in zip(BAND_CENTRES_HZ, g - g.mean()))
    return simulate_raw(
        load_head_model(),
        duration_s=duration_s,
        sfreq=256.0,
        generators=gens,
        background_uv=background,
        background_exponent=exponent,
        background_spectral_gain=shape,
        rng=rng,
    )


def demo_recording():
    """The invented demo participant's recording (deterministic).

    Returns
    -------
    raw : mne.io.RawArray
        240 s of invented eyes-closed rest at 256 Hz (19 sites) of the 41-year-old demo
        participant, with the planted left dorsolateral prefrontal theta patch
        (:data:`PLANTED`), seeded by :data:`DEMO_SEED`.
    """
    rng = np.random.default_rng(DEMO_SEED)
    # A moderate excess: area-mean absolute theta z about 2 in BA8/9/46 against the invented
    # norms, the size of deviation practitioners follow up (|z| 2-3, common practice).  With
    # 0.35 the planted theta share of 1-45 Hz power reached 0.68 (relative z 6.2 in BA8): a
    # focal band-specific excess moves relative power about 2.4 times as many SDs as absolute
    # power in these norms, whose absolute SD also holds the between-person scale.
    planted = Generator(
        _PLANTED_CENTER, "left", freq=6.0, amplitude=PLANTED_AMPLITUDE, radius_mm=15.0
    )
    return simulate_person(rng, DEMO_AGE, duration_s=240.0, extra=(planted,))


def cohort(n: int = 80, *, duration_s: float = 120.0, seed: int = COHORT_SEED):
    """Yield ``(participant_id, age, raw)`` for the invented reference cohort (streamed).

    Parameters
    ----------
    n : int
        Number of invented people; ages drawn uniformly in 18-65 years and yielded in
        ascending order.
    duration_s : float
        Length of each recording, s.
    seed : int
        Seed of the cohort (the same seed gives the same people).

    Yields
    ------
    participant_id : str
        ``"inv001"``, ``"inv002"``, ...
    age : float
        Age, years.
    raw : mne.io.RawArray
        The person's recording (see :func:`simulate_person`).
    """
    rng = np.random.default_rng(seed)
    ages = np.sort(rng.uniform(18, 65, n))
    for i, age in enumerate(ages):
        yield f"inv{i + 1:03d}", float(age), simulate_person(rng, float(age), duration_s=duration_s)


def write_edf(raw, path: Path, *, description: str) -> Path:
    """Write a recording to EDF (atomic), labelled as invented in the header.

    Parameters
    ----------
    raw : mne.io.BaseRaw
        The recording (not changed; a copy is written).
    path : pathlib.Path
        EDF file to write; its folder must exist.  Replaced atomically when it exists.
    description : str
        Text of a zero-length annotation at 0 s (the invented-data label).

    Returns
    -------
    path : pathlib.Path
        ``path``.
    """
    import mne

    raw = raw.copy()
    raw.info["subject_info"] = {"his_id": "INVENTED"}
    raw.set_meas_date(None)
    raw.set_annotations(mne.Annotations([0.0], [0.0], [description]))
    tmp = path.with_name(f".{path.name}.tmp.edf")
    mne.export.export_raw(tmp, raw, fmt="edf", overwrite=True, verbose="error")
    tmp.replace(path)
    return path


def demo_norms_path() -> Path:
    """The shipped invented demo norms.

    Returns
    -------
    path : pathlib.Path
        ``demo_norms.tsv`` in the package data folder.
    """
    from .data import data_path

    return data_path("demo_norms.tsv")


def demo_result(*, config=None, progress: bool | None = False):
    """The demo analysis in memory: the invented participant against the invented norms.

    Parameters
    ----------
    config : AnalysisConfig, optional
        Default settings when omitted.
    progress : bool | None
        Stage progress on a terminal (None: when stderr is one).

    Returns
    -------
    AnalysisResult
        The invented demo participant (41 y, eyes closed) z-scored against the invented demo
        norms.
    """
    from .analysis import analyze

    return analyze(
        demo_recording(),
        config=config,
        age=DEMO_AGE,
        norms=demo_norms_path(),
        condition=DEMO_CONDITION,
        progress=progress,
    )


def build_demo_norms(
    out: str | Path, *, n: int = 80, duration_s: float = 240.0, progress: bool | None = False
) -> Path:
    """Simulate the invented cohort, analyse every member, and write norms.

    Beside ``out``: the per-source norms (``<stem>_sources.npz``, same fingerprint) and the
    calibration table and figure, as :func:`sourcelab.build_norms` writes them.

    The invented recordings last as long as the demo participant's (4 minutes): coherence-type
    coupling measures are biased upwards by about 1/n_epochs, so norms from shorter recordings
    would make the participant's coupling look low (measured with 2-minute norms: mean z of
    lagged coherence, lagged phase synchronisation and wPLI about -1.1).

    ``progress``: a bar over the simulated participants (each simulated and analysed) on
    standard error (None: only when it is a terminal).

    Parameters
    ----------
    out : str or pathlib.Path
        Norms TSV to write; the sidecar files are written beside it.  When it lies in the
        package data folder the data manifest's hashes are updated too.
    n : int
        Number of invented people (those with too little clean data are left out, with a
        warning).
    duration_s : float
        Length of each invented recording, s.
    progress : bool or None
        Progress bar on standard error; None: only when it is a terminal.

    Returns
    -------
    path : pathlib.Path
        ``out``.
    """
    from tqdm import tqdm

    from .analysis import analyze, fingerprint_for
    from .cohort import fit_cohort, write_cohort_norms
    from .config import AnalysisConfig
    from .errors import InputError
    from .norms.fit import clean_epochs_summary, slim_table

    # intervals do not change the values the norms need
    config = AnalysisConfig(n_boot=0, coupling_n_boot=0)
    entries, maps, epochs = [], [], []
    bar = tqdm(
        cohort(n, duration_s=duration_s),
        total=n,
        unit="participant",
        desc="simulating and analysing the invented cohort",
        leave=False,
        disable=None if progress is None else not progress,
    )
    for pid, age, raw in bar:
        try:
            res = analyze(raw, config=config)
        except InputError as exc:  # e.g. too little clean data: left out, as a real lab would
            log.warning("demo cohort: %s left out: %s", pid, exc)
            continue
        entries.append(
            (
                pid,
                age,
                res.roi_table,
                res.sensor_table,
                slim_table(res.pair_table, "pair"),
                slim_table(res.coupling_table, "edge"),
            )
        )
        maps.append({"absolute": res.source_abs, "relative": res.source_rel})
        epochs.append(res.quality.n_epochs)
        log.info("demo cohort: %s (age %.1f) done", pid, age)
    fit, source_norms = fit_cohort(
        entries,
        maps,
        fingerprint=fingerprint_for(config),
        condition=DEMO_CONDITION,
        cohort_info={
            "source": "INVENTED: simulated by sourcelab.demo (seed %d)" % COHORT_SEED,
            "clean_epochs": clean_epochs_summary(epochs),
        },
        notes=(
            "INVENTED demo norms: simulated adults, no real person's data. "
            "Never use them to assess a real person.",
        ),
    )
    written = write_cohort_norms(fit, source_norms, out)[0]
    from .data import DATA_DIR, update_manifest
    from .norms.source_norms import source_norms_path

    if Path(out).resolve().parent == DATA_DIR.resolve():  # the shipped files: record hashes
        from .provenance import sha256_file

        beside = [source_norms_path(out), Path(out).with_suffix(".json")] + [
            Path(out).with_name(Path(out).stem + suffix)
            for suffix in ("_calibration.tsv", "_calibration.png")
        ]
        update_manifest(
            {Path(out).name: written.sha256, **{p.name: sha256_file(p) for p in beside}}
        )
    return Path(out)
