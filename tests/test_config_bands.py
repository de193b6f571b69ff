"""Default bands: the IFCN recommendation (Babiloni et al. 2020, Clin Neurophysiol 131:285-307).

Edges and names as that paper gives them (from memory; see sourcelab/config.py): delta < 4,
theta 4-8, alpha 8-13, beta 13-30, gamma > 30 Hz; sub-bands alpha1 8-10.5, alpha2 10.5-13,
beta1 13-20, beta2 20-30 Hz.
"""

import pytest

from sourcelab.config import BROADBAND_HZ, AnalysisConfig, load_config
from sourcelab.errors import InputError

IFCN = [["delta", 1.0, 4.0], ["theta", 4.0, 8.0], ["alpha", 8.0, 13.0], ["beta", 13.0, 30.0]]


def test_defaults_are_the_ifcn_bands_with_gamma_to_the_low_pass():
    cfg = AnalysisConfig()
    assert cfg.bands.as_list() == IFCN + [["gamma", 30.0, cfg.h_freq]]
    # gamma follows the analysis low-pass; without data above 30 Hz there is no gamma band
    assert AnalysisConfig(h_freq=40.0).bands.as_list()[-1] == ["gamma", 30.0, 40.0]
    assert cfg.replace(h_freq=40.0).bands.as_list()[-1] == ["gamma", 30.0, 40.0]
    assert AnalysisConfig(h_freq=30.0).bands.as_list() == IFCN
    # every default band lies in the fixed broadband range relative power divides by
    lo, hi = BROADBAND_HZ
    assert all(lo <= b[1] < b[2] <= hi for b in cfg.bands.as_list())


def test_sub_bands_from_the_same_recommendation(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("sub_bands = true\n")
    cfg = load_config(p)
    assert cfg.bands.as_list() == [
        ["delta", 1.0, 4.0],
        ["theta", 4.0, 8.0],
        ["alpha1", 8.0, 10.5],
        ["alpha2", 10.5, 13.0],
        ["beta1", 13.0, 20.0],
        ["beta2", 20.0, 30.0],
        ["gamma", 30.0, 45.0],
    ]
    assert cfg.to_dict()["sub_bands"] is True
    # sub-bands apply to the standard set only; your own [bands] table says what it says
    p.write_text("sub_bands = true\n[bands]\nalpha = [8, 12]\n")
    with pytest.raises(InputError, match="sub_bands"):
        load_config(p)
    p.write_text("[bands]\nalpha = [8, 12]\n")
    assert load_config(p).bands.as_list() == [["alpha", 8.0, 12.0]]
