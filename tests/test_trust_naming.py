"""Naming an area by template matching of the whole map (sourcelab.trust.naming)."""

import numpy as np
import pytest

from sourcelab.errors import InputError


def test_noise_free_template_sources_are_named_exactly(rng):
    # Known answer: with the template as the true head and no noise the observed map *is* the
    # template's predicted map of the true source (resolution-matrix column; Pascual-Marqui
    # 2002, zero localisation error), so its correlation is 1 and the true area is named for
    # every source, also with every 4th row only.
    from sourcelab.trust.cortex import cortex_space
    from sourcelab.trust.naming import match_scores

    sp = cortex_space()
    src = rng.choice(np.flatnonzero(sp.codes > 0), 60, replace=False)
    maps = (sp.op.kernel @ sp.gain[:, src]) ** 2
    for k, s in enumerate(src):
        m = match_scores(maps[:, k], sp, int(np.argmax(maps[:, k])))
        assert m.order()[0] == sp.codes[s]
        assert m.corr.max() == pytest.approx(1.0, abs=1e-9)
        assert m.candidates[np.argmax(m.corr)] == s


def test_order_margin_and_exclusion_known_answer():
    from sourcelab.trust.naming import MatchResult

    score = np.array([-np.inf, 0.5, 0.9, -np.inf, 0.7])
    m = MatchResult(candidates=np.arange(3), corr=np.array([0.5, 0.9, 0.7]), area_score=score)
    np.testing.assert_array_equal(m.order(), [2, 4, 1])
    np.testing.assert_array_equal(m.order(exclude=[2]), [4, 1])
    assert m.margin(2) == pytest.approx(0.2) and m.margin(1) == pytest.approx(-0.4)


def test_bad_inputs_are_refused():
    from sourcelab.trust.cortex import cortex_space
    from sourcelab.trust.naming import match_scores

    sp = cortex_space()
    with pytest.raises(InputError, match="values"):
        match_scores(np.ones(5), sp, 0)
    with pytest.raises(InputError, match="peak"):
        match_scores(np.ones(sp.n_src), sp, sp.n_src)
    with pytest.raises(InputError, match="row_step"):
        match_scores(np.ones(sp.n_src), sp, 0, row_step=0)


@pytest.mark.slow
def test_matching_names_at_least_as_well_as_the_peak_under_mismatch(head_model):
    # Held-out simulation under model mismatch (MNE 3-shell sphere true head, 10 mm electrode
    # jitter of seed 1; the naming parameters were chosen on seed 0): naming by the template
    # match is not worse than naming the peak's area beyond two binomial standard errors of the
    # difference (n = 300 noise-free point sources; SE of a paired difference <= 0.04).
    from sourcelab.simulate import localisation as cal
    from sourcelab.trust.cortex import cortex_space
    from sourcelab.trust.localise import rank_areas
    from sourcelab.trust.naming import match_scores

    sp = cortex_space()
    setup = cal.make_setup(head_model, sp, seed=1, realisations=range(1, 17))
    rng = np.random.default_rng(515)
    src = rng.integers(0, sp.n_src, 300)
    maps, _ = cal.point_source_maps(setup, src, rng=rng, snr=None)
    true = sp.codes[src]
    peak = np.array([rank_areas(v, sp.codes, sp.n_areas)[0] for v in maps])
    match = np.array([match_scores(v, sp, int(np.argmax(v))).order()[0] for v in maps])
    d = (match == true).astype(float) - (peak == true)
    assert d.mean() >= -2 * d.std(ddof=1) / np.sqrt(d.size)
