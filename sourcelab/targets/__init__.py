"""Training targets: ranked candidate regions and networks, portable target definitions, replay.

Public API::

    rank_candidates, candidates_from_folder, write_candidates, candidates_html   # candidates
    TargetDefinition, make_target, export_target, read_target, write_target      # definitions
    OnlineTarget, replay_array, replay_recording, expected_ratio                 # replay
    LiveValue, live_section, expected_live_sd                                    # live values
    CouplingTarget, export_coupling_target, OnlineCoupling, replay_coupling_array # pairs, edges

``sourcelab.targets.stream`` (needs mne-lsl) applies a target to a Lab Streaming Layer stream.

A candidate is a statistical deviation, not a recommendation: the choice of any training target
rests with a licensed practitioner who weighs symptoms and history.  ``SCHEMA.md`` documents the
``sourcelab-target/1`` JSON layout.
"""

from .candidates import (
    CANDIDATE_COLUMNS,
    candidates_for_table,
    candidates_from_folder,
    candidates_html,
    rank_candidates,
    read_result_folder,
    write_candidates,
)
from .coupling import (
    CouplingReplay,
    CouplingTarget,
    OnlineCoupling,
    coupling_norm_at_age,
    export_coupling_target,
    replay_coupling_array,
    replay_coupling_recording,
)
from .definition import (
    SCHEMA,
    TargetDefinition,
    export_target,
    make_target,
    norm_at_age,
    read_target,
    target_from_dict,
    write_target,
)
from .live import LiveValue, expected_live_sd, live_section
from .replay import (
    OnlineTarget,
    ReplayResult,
    expected_ratio,
    plot_replay,
    replay_array,
    replay_recording,
    welch_band_response,
)

__all__ = [
    "CANDIDATE_COLUMNS",
    "SCHEMA",
    "CouplingReplay",
    "CouplingTarget",
    "LiveValue",
    "OnlineCoupling",
    "OnlineTarget",
    "ReplayResult",
    "TargetDefinition",
    "candidates_for_table",
    "candidates_from_folder",
    "candidates_html",
    "coupling_norm_at_age",
    "expected_live_sd",
    "expected_ratio",
    "export_coupling_target",
    "export_target",
    "live_section",
    "replay_coupling_array",
    "replay_coupling_recording",
    "make_target",
    "norm_at_age",
    "plot_replay",
    "rank_candidates",
    "read_result_folder",
    "read_target",
    "replay_array",
    "replay_recording",
    "target_from_dict",
    "welch_band_response",
    "write_candidates",
    "write_target",
]
