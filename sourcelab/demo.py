"""The demo: an invented participant and an invented reference cohort, simulated by sourcelab.

Scenario (entirely invented, no real person): "demo-01", a fictional 41-year-old adult, four
minutes of eyes-closed rest at 256 Hz.  The simulation plants an excess of theta (6 Hz) activity in
a left dorsolateral prefrontal patch (around MNI (-40, 30, 30), Brodmann areas 9/46) on top of the
normal posterior alpha that every member of the invented cohort has.  The demo norms come from 80
invented adults aged 18-65 simulated with between-person variability (log-normal generator
strengths, alpha frequency that slows with age, background power that falls with age).
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


def _person_generators(rng: np.random.Generator, age: float) -> tuple[Generator, ...]:
    """Generators of one invented person: bilateral occipital alpha, frontal-midline theta,
    central beta; strengths log-normal across people, alpha frequency slowing with age."""
    alpha_f = 10.4 - 0.02 * (age - 18) + rng.normal(0, 0.4)
    a = np.exp(rng.normal(np.log(0.45), 0.25))
    gens = [
        Generator((-18, -92, 4), "left", freq=alpha_f, amplitude=a * np.exp(rng.normal(0, 0.1))),
        Generator((20, -92, 4), "right", freq=alpha_f, amplitude=a * np.exp(rng.normal(0, 0.1))),
        Generator((-30, -70, 40), "left", freq=alpha_f, amplitude=0.5 * a),
        Generator((30, -70, 40), "right", freq=alpha_f, amplitude=0.5 * a),
        Generator((-4, 40, 20), "left", freq=6.0, amplitude=np.exp(rng.normal(np.log(0.3), 0.3))),
        Generator((4, 40, 20), "right", freq=6.0, amplitude=np.exp(rng.normal(np.log(0.3), 0.3))),
        Generator((-38, -20, 55), "left", freq=18.0, bandwidth=6.0,
                  amplitude=np.exp(rng.normal(np.log(0.25), 0.3))),
        Generator((38, -20, 55), "right", freq=18.0, bandwidth=6.0,
                  amplitude=np.exp(rng.normal(np.log(0.25), 0.3))),
    ]
    return tuple(gens)


def _person_background(rng: np.random.Generator, age: float) -> float:
    return float(np.exp(rng.normal(np.log(10.0) - 0.004 * (age - 18), 0.15)))


def simulate_person(rng: np.random.Generator, age: float, *, duration_s: float,
                    extra: tuple[Generator, ...] = ()):
    """One invented person's recording as an ``mne.io.RawArray``."""
    from .headmodel import load_head_model

    gens = _person_generators(rng, age) + tuple(extra)
    return simulate_raw(load_head_model(), duration_s=duration_s, sfreq=256.0,
                        generators=gens, background_uv=_person_background(rng, age), rng=rng)


def demo_recording():
    """The invented demo participant's recording (deterministic)."""
    rng = np.random.default_rng(DEMO_SEED)
    planted = Generator(_PLANTED_CENTER, "left", freq=6.0, amplitude=0.35, radius_mm=15.0)
    return simulate_person(rng, DEMO_AGE, duration_s=240.0, extra=(planted,))


def cohort(n: int = 80, *, duration_s: float = 120.0, seed: int = COHORT_SEED):
    """Yield ``(participant_id, age, raw)`` for the invented reference cohort (streamed)."""
    rng = np.random.default_rng(seed)
    ages = np.sort(rng.uniform(18, 65, n))
    for i, age in enumerate(ages):
        yield f"inv{i + 1:03d}", float(age), simulate_person(rng, float(age),
                                                             duration_s=duration_s)


def write_edf(raw, path: Path, *, description: str) -> Path:
    """Write a recording to EDF (atomic), labelled as invented in the header."""
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
    """The shipped invented demo norms."""
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
    """
    from .analysis import analyze

    return analyze(demo_recording(), config=config, age=DEMO_AGE, norms=demo_norms_path(),
                   condition=DEMO_CONDITION, progress=progress)


def build_demo_norms(out: str | Path, *, n: int = 80, duration_s: float = 240.0) -> Path:
    """Simulate the invented cohort, analyse every member, and write norms (+ calibration).

    The invented recordings last as long as the demo participant's (4 minutes): coherence-type
    coupling measures are biased upwards by about 1/n_epochs, so norms from shorter recordings
    would make the participant's coupling look low (measured with 2-minute norms: mean z of
    lagged coherence, lagged phase synchronisation and wPLI about -1.1).
    """
    from .analysis import analyze, fingerprint_for
    from .config import AnalysisConfig
    from .errors import InputError
    from .norms import norms_from_tables, write_norms
    from .norms.fit import clean_epochs_summary, slim_table

    # intervals do not change the values the norms need
    config = AnalysisConfig(n_boot=0, coupling_n_boot=0)
    entries, epochs = [], []
    for pid, age, raw in cohort(n, duration_s=duration_s):
        try:
            res = analyze(raw, config=config)
        except InputError as exc:  # e.g. too little clean data: left out, as a real lab would
            log.warning("demo cohort: %s left out: %s", pid, exc)
            continue
        entries.append((pid, age, res.roi_table, res.sensor_table,
                        slim_table(res.pair_table, "pair"), slim_table(res.coupling_table, "edge")))
        epochs.append(res.quality.n_epochs)
        log.info("demo cohort: %s (age %.1f) done", pid, age)
    norms = norms_from_tables(
        entries, fingerprint=fingerprint_for(config), condition=DEMO_CONDITION,
        cohort_info={"source": "INVENTED: simulated by sourcelab.demo (seed %d)" % COHORT_SEED,
                     "clean_epochs": clean_epochs_summary(epochs)},
        notes=("INVENTED demo norms: simulated adults, no real person's data. "
               "Never use them to assess a real person.",))
    written = write_norms(norms, out)
    from .data import DATA_DIR, update_manifest

    if Path(out).resolve().parent == DATA_DIR.resolve():  # the shipped file: record its hash
        update_manifest({Path(out).name: written.sha256})
    return Path(out)
