"""States and procedures from annotations (invented annotation lists; the real recording's own
annotations are checked in test_intake_realdata.py)."""

from __future__ import annotations

import numpy as np
import pytest

from sourcelab.intake.states import (
    POST_HV_MIN_S,
    classify,
    procedure_spans,
    state_spans,
    subtract,
)


@pytest.mark.parametrize(
    "text, kind",
    [
        # common clinical wordings (common practice), any case
        ("HV", "hyperventilation"),
        ("HV START", "hyperventilation"),
        ("hv 01:30", "hyperventilation"),
        ("Hyperventilation begin", "hyperventilation"),
        ("HV END", "hyperventilation"),
        ("post-HV", "post-hyperventilation"),
        ("POST HV 00:30", "post-hyperventilation"),
        ("post hyperventilation", "post-hyperventilation"),
        ("photic", "photic stimulation"),
        ("Photic stimulation 10 Hz", "photic stimulation"),
        ("PHOTO 2Hz", "photic stimulation"),
        ("IPS 14 Hz", "photic stimulation"),
        ("flash 6Hz", "photic stimulation"),
        ("strobe on", "photic stimulation"),
        ("SZ START", "seizure"),
        ("seizure", "seizure"),
        ("eyes open", "eyes open"),
        ("Eyes Opened", "eyes open"),
        ("EO", "eyes open"),
        ("eyes closed", "eyes closed"),
        ("EYES CLOSE", "eyes closed"),
        ("EC", "eyes closed"),
        ("awake", "awake"),
        ("awakened pt", "awake"),
        ("asleep", "asleep"),
        ("drowsy", "asleep"),
        ("counting aloud", "task"),
        # comments: not states
        ("sleep spindles", "comment"),
        ("vertex waves", "comment"),
        ("blinking", "comment"),
        ("PAT B_IPSIEARS EEG", "comment"),
        ("stretching", "comment"),
        ("electrode check", "comment"),
    ],
)
def test_classify(text, kind):
    assert classify(text) == kind


#: An invented recording protocol (1,000 s): rest, photic train, rest, HV with a marker inside.
PROTOCOL = [
    (10.0, 0.0, "Eyes Closed"),
    (60.0, 0.0, "eyes open"),
    (80.0, 0.0, "blinking"),
    (100.0, 0.0, "PHOTIC 2 Hz"),
    (110.0, 0.0, "PHOTIC 4 Hz"),
    (120.0, 0.0, "PHOTIC 6 Hz"),
    (150.0, 0.0, "eyes closed"),
    (200.0, 0.0, "eyes open"),
    (250.0, 0.0, "HV start"),
    (300.0, 0.0, "eyes open"),
    (310.0, 0.0, "HV 01:00"),
    (430.0, 0.0, "HV end"),
    (600.0, 0.0, "EC"),
    (650.0, 0.0, "SZ START"),
    (655.0, 0.0, "SZ END"),
    (700.0, 0.0, "counting"),
    (750.0, 0.0, "EO"),
    (800.0, 20.0, "photic"),
]


def _spans(spans):
    return [(s.kind, round(s.start, 1), round(s.stop, 1)) for s in spans]


def test_procedure_spans():
    got = _spans(procedure_spans(PROTOCOL, 1000.0))
    assert got == [
        # photic train: first marker to the next state marker after the last one
        ("photic stimulation", 100.0, 150.0),
        # HV ends at its end marker; the "eyes open" inside it does not end it
        ("hyperventilation", 250.0, 430.0),
        # at least POST_HV_MIN_S after HV is excluded
        ("post-hyperventilation", 430.0, 430.0 + POST_HV_MIN_S),
        ("seizure", 650.0, 655.0),
        ("photic stimulation", 800.0, 820.0),  # a marker with a duration spans it
    ]


def test_marked_post_hv_extends_the_exclusion():
    ann = [
        (0.0, 0.0, "HV START"),
        (180.0, 0.0, "HV END"),
        (210.0, 0.0, "POST HV 00:30"),
        (300.0, 0.0, "POST HV 02:00"),
        (400.0, 0.0, "eyes closed"),
    ]
    got = _spans(procedure_spans(ann, 600.0))
    assert got == [("hyperventilation", 0.0, 180.0), ("post-hyperventilation", 180.0, 400.0)]


def test_state_ends_at_next_state_marker_and_skips_procedures():
    proc = procedure_spans(PROTOCOL, 1000.0)
    closed, excl = subtract(state_spans(PROTOCOL, "eyes closed", 1000.0), proc)
    # "Eyes Closed" 10 -> "eyes open" 60 ("blinking" is a comment, not a boundary); 150 -> 200;
    # "EC" 600 -> seizure at 650; after the seizure nothing is selected until a state marker
    assert _spans(closed) == [
        ("eyes closed", 10.0, 60.0),
        ("eyes closed", 150.0, 200.0),
        ("eyes closed", 600.0, 650.0),
    ]
    assert excl == []
    opened, excl = subtract(state_spans(PROTOCOL, "EO", 1000.0), proc)
    # 60 -> photic at 100; 200 -> HV at 250; the marker inside HV selects nothing; 750 -> photic
    assert _spans(opened) == [
        ("eyes open", 60.0, 100.0),
        ("eyes open", 200.0, 250.0),
        ("eyes open", 750.0, 800.0),
    ]
    assert [e["kind"] for e in excl] == ["hyperventilation"]
    assert excl[0]["overlap_s"] == pytest.approx(10.0)  # 300 -> HV 01:00 at 310


def test_selection_in_clean_recording_lists_exclusions(rng):
    # Through clean_recording: a time range over a hyperventilation span loses that span, and
    # the clean-data summary lists it (seconds removed, per reason "procedure").
    import mne

    from sourcelab.config import SITES_1020, AnalysisConfig
    from sourcelab.intake import clean_recording, read_recording

    sf = 128.0
    x = rng.standard_normal((19, int(200 * sf))) * 10e-6
    raw = mne.io.RawArray(x, mne.create_info(list(SITES_1020), sf, "eeg"), verbose="error")
    raw.set_annotations(mne.Annotations([50.0, 80.0], [0.0, 0.0], ["HV start", "HV end"]))
    cfg = AnalysisConfig(ocular_correction="off", min_clean_s=10.0)
    cl = clean_recording(read_recording(raw), cfg, select=[(0.0, 200.0)])
    # HV 50-80 s plus 60 s post-HV: 90 s excluded
    assert cl.rejected_s["procedure"] == pytest.approx(90.0)
    assert [e["kind"] for e in cl.excluded] == ["hyperventilation", "post-hyperventilation"]
    assert np.all((cl.epoch_onsets_s < 50.0 - 1.9) | (cl.epoch_onsets_s >= 140.0))
    kept_all = clean_recording(read_recording(raw), cfg.replace(exclude_procedures=False))
    assert kept_all.rejected_s["procedure"] == 0.0 and kept_all.kept_s > cl.kept_s
