"""Norms from a folder of recordings (:mod:`sourcelab.cohort`): participants, files, failures."""

from __future__ import annotations

import sys
import types

import numpy as np
import pandas as pd
import pytest

from sourcelab.cohort import build_norms, find_recording
from sourcelab.config import DEFAULT_BANDS
from sourcelab.errors import InputError
from sourcelab.norms import normalise_condition, read_norms
from sourcelab.provenance import Fingerprint
from sourcelab.simulate import gaussian_cohort

FP = Fingerprint(
    headmodel_sha256="0" * 64,
    method="sLORETA",
    orientation="fixed",
    lambda2=1 / 9,
    bands=DEFAULT_BANDS,
)


@pytest.fixture(scope="module")
def cohort():
    # 100 invented controls x 66 quantities, Gaussian after transform with an age trend
    return gaussian_cohort(100, rng=np.random.default_rng(7))


def _fake_analysis(cohort, fail_id):
    by_file = {}
    for pid, age, roi, sen in cohort.entries:
        by_file[pid] = (roi, sen)

    from sourcelab.headmodel import load_head_model

    n_src = load_head_model().n_src
    rng = np.random.default_rng(3)

    def analyze(recording, *, config=None, age=None, norms=None, **kw):
        pid = recording.name.split("_")[0]
        if pid == fail_id:
            raise RuntimeError("flat channels: Fz, Cz\nsecond line")
        roi, sen = by_file[pid]
        # invented per-source maps (the cohort builder also fits per-source norms)
        src = rng.lognormal(0.0, 0.3, (len(FP.bands), n_src)).astype(np.float32)
        return types.SimpleNamespace(
            roi_table=roi,
            sensor_table=sen,
            fingerprint=FP,
            source_abs=src,
            source_rel=src / (3 * src.max()),
            pair_table=None,
            coupling_table=None,
            quality=types.SimpleNamespace(n_epochs=60),
        )

    return types.SimpleNamespace(analyze=analyze)


def test_build_from_cohort_folder(cohort, tmp_path, monkeypatch):
    root = tmp_path / "cohort"
    rows = ["participant_id\tage\tsex\tcondition"]
    for k, (pid, age, _, _) in enumerate(cohort.entries[:40]):
        (root / pid / "eeg").mkdir(parents=True)
        (root / pid / "eeg" / f"{pid}_task-rest_eeg.edf").write_bytes(b"")
        rows.append(f"{pid}\t{age}\t{'FM'[k % 2]}\teyes closed")
    rows.append("sub-900\tn/a\tF\teyes closed")  # bad age
    rows.append("../../etc/passwd\t30\tF\teyes closed")  # hostile id: never a path
    rows.append("sub-901\t30\tM\teyes open")  # other condition: not used
    (root / "participants.tsv").write_text("\n".join(rows) + "\n")
    monkeypatch.setitem(
        sys.modules, "sourcelab.analysis", _fake_analysis(cohort, fail_id="sub-003")
    )
    with pytest.raises(InputError, match="conditions"):  # two conditions listed: must choose
        build_norms(root, root / "participants.tsv", out=tmp_path / "out" / "norms.tsv")
    res = build_norms(
        root,
        root / "participants.tsv",
        out=tmp_path / "out" / "norms.tsv",
        min_n_per_bin=20,
        condition="Eyes closed",
    )
    failed = dict(res.failures)
    assert set(failed) == {"sub-003", "sub-900", "../../etc/passwd"}
    assert "\n" not in failed["sub-003"] and "no recording" in failed["../../etc/passwd"]
    nm = read_norms(tmp_path / "out" / "norms.tsv")
    assert nm.cohort["n"] == 39 and nm.sha256 == res.norms.sha256
    assert normalise_condition(nm.condition) == "eyes closed"
    # sub-003 (k = 2, "F") failed: 19 F + 20 M remain
    assert nm.cohort["sex"] == {"F": 19, "M": 20}
    rep = pd.read_csv(res.report_path, sep="\t")
    assert len(rep) == len(nm.table) and "loo_frac_1.96" in rep
    assert res.figure_path.read_bytes()[:4] == b"\x89PNG"


def test_find_recording_flat_folder_and_ambiguity(tmp_path):
    (tmp_path / "P01.edf").write_bytes(b"")
    (tmp_path / "P02_rest.vhdr").write_bytes(b"")
    (tmp_path / "P02_rest.eeg").write_bytes(b"")
    (tmp_path / "P03.edf").write_bytes(b"")
    (tmp_path / "P03.bdf").write_bytes(b"")
    assert find_recording(tmp_path, "P01").name == "P01.edf"
    assert find_recording(tmp_path, "P02").name == "P02_rest.vhdr"
    with pytest.raises(InputError, match="several"):
        find_recording(tmp_path, "P03")
    with pytest.raises(InputError, match="no recording"):
        find_recording(tmp_path, "P0")
