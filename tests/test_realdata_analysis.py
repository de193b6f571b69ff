"""The whole analysis of a real child's recording with default settings (issue 15).

eeghdf 0.2.4 sdist (tests/realdata.py): the tests' own eyes-closed and eyes-open spans, analysed
exactly as ``sourcelab analyze REC --select ...`` would, without a relaxed configuration.
Offline these tests skip with one line, unless SOURCELAB_REQUIRE_NETWORK=1.
"""

from __future__ import annotations

import pytest

import realdata
from sourcelab.intake import read_recording
from sourcelab.analysis import analyze

pytestmark = pytest.mark.network
realdata.require()  # one skip line for the module when offline

#: Brodmann's occipital and parietal areas (common anatomy).
POSTERIOR = {"BA17", "BA18", "BA19", "BA7", "BA5", "BA39", "BA40"}
#: Where the issue found eye artefact reported as delta generators.
ORBITOFRONTAL = {"BA10", "BA11", "BA47", "BA25"}


@pytest.fixture(scope="module")
def rec():
    return read_recording(realdata.absence_raw())


@pytest.fixture(scope="module")
def closed(rec):
    return analyze(rec, select=list(realdata.EYES_CLOSED))


@pytest.fixture(scope="module")
def opened(rec):
    return analyze(rec, select=list(realdata.EYES_OPEN))


def _ranked(res, atlas, band):
    t = res.roi_table
    t = t[(t.atlas == atlas) & (t.band == band) & (t.measure == "absolute")]
    return t.sort_values("value", ascending=False)


def _occipital_alpha(res):
    t = _ranked(res, "lobes", "alpha")
    return float(t[t.roi == "occipital"].value.mean())


def _check_posterior_alpha(res):
    # Eyes-closed posterior dominant rhythm (Berger 1929; Klimesch 1999 — from memory)
    assert _ranked(res, "lobes", "alpha").iloc[0].roi in ("occipital", "parietal")
    assert _ranked(res, "brodmann", "alpha").iloc[0].roi in POSTERIOR


def _check_delta_maximum(res):
    # Issue 15: after ocular correction the eyes-closed delta maximum is no longer in
    # BA10/11/47/25 - or the analysis carries the ocular warning for it.  Both ways: a maximum
    # there always comes with the warning, and the warning names that area.
    slow = res.quality.ocular["slow_maximum"]
    top = _ranked(res, "brodmann", "delta").iloc[0]
    assert (slow["roi"], slow["hemisphere"]) == (top.roi, top.hemisphere)
    eye = [w for w in res.warnings if "eye" in w]
    if top.roi in ORBITOFRONTAL:
        assert slow["confusable"] and any(top.roi in w for w in eye), eye
    else:
        assert not slow["confusable"]


def test_both_parts_analysed_with_defaults(closed, opened):
    for res in (closed, opened):
        assert res.config.rejection == "auto" and res.config.ocular_correction == "auto"
        assert res.quality.kept_s >= res.config.min_clean_s
        assert res.quality.ocular["method"] == "ica"


def test_eyes_closed_alpha_is_posterior(closed):
    _check_posterior_alpha(closed)


def test_eyes_closed_over_open_occipital_alpha(closed, opened):
    # Alpha blocking on eye opening (Berger 1929 — from memory); issue 15 asks for > 1.5.
    assert _occipital_alpha(closed) / _occipital_alpha(opened) > 1.5


def test_eyes_closed_delta_maximum_or_ocular_warning(closed):
    _check_delta_maximum(closed)


def test_with_age_given(rec):
    # The same with the child's age (~10 y, DATA-SOURCES.md): age-aware bounds, same answers.
    res = analyze(rec, select=list(realdata.EYES_CLOSED), age=10.0)
    assert res.quality.thresholds["per_site"]["bounds"]["age_factor"] == 2.0
    _check_posterior_alpha(res)
    _check_delta_maximum(res)
