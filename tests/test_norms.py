"""Norms file format, transforms, z-scoring and FDR (known-answer and reference checks)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from sourcelab.config import DEFAULT_BANDS
from sourcelab.errors import InputError
from sourcelab.norms import (
    COLUMNS,
    TRANSFORMS,
    Norms,
    apply_norms,
    bh_adjust,
    norms_from_tables,
    chance_summary,
    get_transform,
    read_norms,
    write_norms,
)
from sourcelab.simulate import gaussian_cohort
from sourcelab.provenance import Fingerprint

FP = Fingerprint(
    headmodel_sha256="0" * 64,
    method="sLORETA",
    orientation="fixed",
    lambda2=1 / 9,
    bands=DEFAULT_BANDS,
)


@pytest.fixture(scope="module")
def cohort():
    return gaussian_cohort(60, rng=np.random.default_rng(20240611))


@pytest.fixture(scope="module")
def norms(cohort):
    return norms_from_tables(cohort.entries, fingerprint=FP, condition="eyes closed", degree=1)


@pytest.fixture()
def norms_file(norms, tmp_path):
    return write_norms(norms, tmp_path / "norms.tsv").path


# ----------------------------------------------------------------------------- reference facts


def _binned_row(n: int) -> dict:
    # one quantity, degree 0 (an age bin), mean 1 and SD 0.5 on log10, n controls:
    # (XᵀX)⁻¹ = 1/n, df = n - 1 (FORMAT.md)
    row = {
        "kind": "roi",
        "atlas": "brodmann",
        "name": "BA17",
        "hemisphere": "left",
        "band": "alpha",
        "measure": "absolute",
        "age_min": 10.0,
        "age_max": 80.0,
        "model": "binned",
        "degree": 0,
        "transform": "log10",
        "b0": 1.0,
        "b1": 0.0,
        "b2": 0.0,
        "b3": 0.0,
        "sd": 0.5,
        "n": n,
        "df": n - 1,
    }
    from sourcelab.norms.io import V_COLUMNS

    row.update({c: 0.0 for c in V_COLUMNS}, v00=1.0 / n)
    return row


@pytest.mark.parametrize("n", [20, 100_000])
def test_apply_norms_known_z_and_predictive_p(n):
    # A value of 100 is z = (log10(100) - 1) / 0.5 = +2 and a value of 1 is z = -2.  The
    # predictive p of a case against n controls is Student t with n - 1 df at
    # t = z / sqrt(1 + 1/n) (Crawford & Howell 1998, from memory; scipy.stats.t is the
    # reference); with n -> infinity it tends to the normal 1 - P(|Z| < 2) = 1 - 0.954500
    # (standard normal table, DATA-SOURCES.md).
    from scipy import stats

    nm = Norms(table=pd.DataFrame([_binned_row(n)]), fingerprint=FP, condition="eyes closed")
    t = pd.DataFrame(
        {
            "atlas": ["brodmann"] * 2,
            "roi": ["BA17"] * 2,
            "hemisphere": ["left"] * 2,
            "band": ["alpha"] * 2,
            "measure": ["absolute"] * 2,
            "value": [100.0, 1.0],
        }
    )
    out = apply_norms(t, nm, age=30.0, fingerprint=FP, condition="eyes closed")
    np.testing.assert_allclose(out["z"], [2.0, -2.0], rtol=1e-12)
    expected = 2 * stats.t.sf(2.0 / np.sqrt(1 + 1 / n), n - 1)
    np.testing.assert_allclose(out["p"], expected, rtol=1e-10)
    if n > 1000:
        np.testing.assert_allclose(out["p"], 1 - 0.954500, atol=1e-5)
    else:
        assert (out["p"] > 1 - 0.954500 + 0.01).all()  # small norms: clearly less extreme
    np.testing.assert_allclose(np.abs(out["z_equivalent"]), stats.norm.isf(expected / 2))
    from sourcelab.norms import chance_summary

    assert chance_summary(out)["expected_beyond_1.96"] == pytest.approx(
        2 * (1 - 0.950004), abs=1e-6
    )


# ----------------------------------------------------------------------------- transforms


@pytest.mark.parametrize(
    "name, x",
    [
        ("log10", np.array([1e-6, 0.3, 1.0, 57.0, 1e6])),
        ("logit", np.array([1e-6, 0.01, 0.5, 0.9, 1 - 1e-9])),
    ],
)
def test_transform_round_trip(name, x):
    # Gasser, Bächer & Möcks 1982 (from memory): log for absolute, logit for relative power
    t = get_transform(name)
    np.testing.assert_allclose(t.inverse(t.forward(x)), x, rtol=1e-9)
    y = np.linspace(-8, 8, 17)
    np.testing.assert_allclose(t.forward(t.inverse(y)), y, rtol=1e-9, atol=1e-9)


def test_transform_known_values():
    # definitions: log10(100) = 2; logit(p) = ln(p / (1 - p)), logit(0.5) = 0, logit(0.75) = ln 3
    assert TRANSFORMS["log10"].forward(100.0) == pytest.approx(2.0)
    assert TRANSFORMS["logit"].forward(0.5) == pytest.approx(0.0)
    assert TRANSFORMS["logit"].forward(0.75) == pytest.approx(np.log(3.0))


@pytest.mark.parametrize("bad", [0.0, 1.0, -0.1, 1.5])
def test_logit_refuses_outside_open_unit_interval(bad):
    with pytest.raises(InputError, match="open interval"):
        TRANSFORMS["logit"].forward(np.array([0.2, bad]))


def test_log10_refuses_non_positive_and_unknown_transform():
    with pytest.raises(InputError, match="> 0"):
        TRANSFORMS["log10"].forward(np.array([1.0, 0.0]))
    with pytest.raises(InputError, match="log10"):
        get_transform("sqrt")


# ----------------------------------------------------------------------------- FDR


def test_bh_agrees_with_scipy():
    # Benjamini & Hochberg 1995, J R Stat Soc B 57:289-300; scipy.stats.false_discovery_control
    rng = np.random.default_rng(3)
    p = np.concatenate([rng.uniform(0, 1, 200), rng.uniform(0, 1e-3, 20)])
    q = bh_adjust(p)
    np.testing.assert_allclose(q, stats.false_discovery_control(p, method="bh"), rtol=1e-12)
    ref = stats.false_discovery_control(p, method="bh") <= 0.05
    assert ((q <= 0.05) == ref).all() and ref.sum() >= 10
    # NaN entries are ignored (m counts finite p only)
    pn = np.concatenate([p, [np.nan, np.nan]])
    np.testing.assert_allclose(bh_adjust(pn)[:-2], q, rtol=1e-12)
    assert np.isnan(bh_adjust(pn)[-2:]).all()


# ----------------------------------------------------------------------------- file format


def test_write_read_round_trip_exact(norms, tmp_path):
    w = write_norms(norms, tmp_path / "n.tsv")
    r = read_norms(w.path)
    pd.testing.assert_frame_equal(r.table, norms.table, check_exact=True)
    assert r.fingerprint == norms.fingerprint and not r.fingerprint.differences(FP)
    assert r.condition == "eyes closed" and r.cohort == norms.cohort
    assert r.sha256 == w.sha256 and len(r.sha256) == 64
    # writing what was read gives the same bytes
    w2 = write_norms(r, tmp_path / "n2.tsv")
    assert w2.sha256 == w.sha256
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temp left


def test_table_reads_with_plain_pandas_and_sidecar_describes_columns(norms, tmp_path):
    # issue 16: every TSV reads with pandas.read_csv(sep="\t"); metadata in the JSON sidecar
    import json

    w = write_norms(norms, tmp_path / "n.tsv")
    plain = pd.read_csv(w.path, sep="\t")
    assert tuple(plain.columns) == COLUMNS and len(plain) == len(norms.table)
    side = json.loads((tmp_path / "n.json").read_text(encoding="utf-8"))
    assert set(COLUMNS) <= set(side) and all(side[c]["Description"] for c in COLUMNS)
    assert side["age_min"]["Units"] == "years"
    meta = side["sourcelab-norms"]
    assert meta["FormatVersion"] == 3 and meta["condition"] == "eyes closed"
    assert meta["fingerprint"] == norms.fingerprint.to_dict()
    # without its sidecar the table is refused in one line naming the file
    (tmp_path / "n.json").unlink()
    with pytest.raises(InputError, match="no sidecar n.json") as exc:
        read_norms(w.path)
    assert str(w.path) in str(exc.value) and "\n" not in str(exc.value)


def test_format_2_files_still_read(norms, tmp_path):
    # norms written by sourcelab 0.2 (commented header, no sidecar) read to the same table
    from sourcelab.norms.io import _format_legacy

    p = tmp_path / "old.tsv"
    p.write_text(_format_legacy(norms), encoding="utf-8")
    r = read_norms(p)
    pd.testing.assert_frame_equal(r.table, norms.table, check_exact=True)
    assert r.fingerprint == norms.fingerprint and r.condition == norms.condition


def _edit(path, fn):
    lines = path.read_text().splitlines()
    lines = fn(lines)
    path.write_text("\n".join(lines) + "\n")
    return path


def _table_start(lines):
    return next(i for i, ln in enumerate(lines) if not ln.startswith("#"))


def _set_cell(col, value, row=0):
    def fn(lines):
        h = _table_start(lines)
        names = lines[h].split("\t")
        cells = lines[h + 1 + row].split("\t")
        cells[names.index(col)] = value
        lines[h + 1 + row] = "\t".join(cells)
        return lines

    return fn


def _drop_col(col):
    def fn(lines):
        h = _table_start(lines)
        k = lines[h].split("\t").index(col)
        return lines[:h] + [
            "\t".join(c for i, c in enumerate(ln.split("\t")) if i != k) for ln in lines[h:]
        ]

    return fn


def _dup_row(lines):
    h = _table_start(lines)
    return lines + [lines[h + 1]]


def _overlap(lines):
    # a second range 50..90 of the first quantity overlaps its full-range row
    h = _table_start(lines)
    names = lines[h].split("\t")
    cells = lines[h + 1].split("\t")
    cells[names.index("age_min")] = "50.0"
    cells[names.index("age_max")] = "90.0"
    return lines + ["\t".join(cells)]


@pytest.fixture
def legacy_file(norms, tmp_path):
    from sourcelab.norms.io import _format_legacy

    p = tmp_path / "legacy.tsv"
    p.write_text(_format_legacy(norms), encoding="utf-8")
    return p


_HEADER_EDITS = [
    (lambda ls: ["# sourcelab-norms 9"] + ls[1:], "unsupported norms format version"),
    (lambda ls: ["kind\tatlas"] + ls[1:], "no sidecar"),
    (lambda ls: ["colour\tatlas"] + ls[1:], "not a sourcelab norms file"),
    (lambda ls: [ls[0], "# colour: red"] + ls[1:], "bad header line"),
    (lambda ls: [ln for ln in ls if not ln.startswith("# fingerprint")], "fingerprint"),
    (
        lambda ls: [ln if not ln.startswith("# fingerprint") else "# fingerprint: {}" for ln in ls],
        "fingerprint",
    ),
    (lambda ls: [ln for ln in ls if not ln.startswith("# condition")], "condition"),
]


@pytest.mark.parametrize("edit, message", _HEADER_EDITS)
def test_bad_format_2_headers_raise_input_error_naming_file(legacy_file, edit, message):
    _edit(legacy_file, edit)
    with pytest.raises(InputError, match=message) as exc:
        read_norms(legacy_file)
    assert str(legacy_file) in str(exc.value) and "\n" not in str(exc.value)


@pytest.mark.parametrize(
    "edit, message",
    [
        (_drop_col("sd"), "missing columns"),
        (_set_cell("sd", "0.0"), "sd must be > 0"),
        (_set_cell("sd", "-0.2"), "sd must be > 0"),
        (_set_cell("b0", "nan"), "NaN"),
        (_set_cell("b0", "n/a"), "NaN"),
        (_set_cell("transform", "sqrt"), "unknown transform"),
        (_set_cell("kind", "voxel"), "kind must be"),
        (_set_cell("b3", "0.5"), "must be 0"),
        (_dup_row, "duplicate row"),
        (_overlap, "overlapping age ranges"),
        (lambda ls: ["colour\tatlas"] + ls[1:], "not a sourcelab norms file"),
    ],
)
def test_bad_norms_files_raise_input_error_naming_file(norms_file, edit, message):
    _edit(norms_file, edit)
    with pytest.raises(InputError, match=message) as exc:
        read_norms(norms_file)
    assert str(norms_file) in str(exc.value) and "\n" not in str(exc.value)


def test_missing_file_and_dataclass_validation(tmp_path, norms):
    with pytest.raises(InputError, match="not found"):
        read_norms(tmp_path / "absent.tsv")
    bad = norms.table.copy()
    bad.loc[3, "sd"] = np.nan
    with pytest.raises(InputError, match="NaN"):
        Norms(table=bad, fingerprint=FP, condition="eyes closed")
    assert tuple(norms.table.columns) == COLUMNS


# ----------------------------------------------------------------------------- z-scoring


def test_z_known_answer_against_estimated_model(cohort, norms):
    # values placed exactly k estimated SDs from the estimated mean must give z = k
    age = 33.0
    roi, _ = cohort.tables_at(age, np.zeros(len(cohort.keys)))
    t = norms.table[norms.table.kind == "roi"].reset_index(drop=True)
    x = np.log10(age)
    mean = t.b0 + t.b1 * x + t.b2 * x**2 + t.b3 * x**3
    k = np.linspace(-3, 3, len(t))
    tv = mean + k * t.sd
    roi = pd.DataFrame(
        {
            "atlas": t.atlas,
            "roi": t.name,
            "hemisphere": t.hemisphere,
            "band": t.band,
            "measure": t.measure,
            "value": [get_transform(tr).inverse(v) for tr, v in zip(t["transform"], tv)],
        }
    )
    out = apply_norms(roi, norms, age=age, fingerprint=FP, condition="eyes closed")
    np.testing.assert_allclose(out.z, k, rtol=1e-9, atol=1e-9)
    # two-sided predictive p: Student t (scipy.stats) with the row's df at
    # t = z / sqrt(1 + h0), h0 = x0' (X'X)^-1 x0 from the row's stored (X'X)^-1 (Crawford &
    # Garthwaite 2006, from memory); BH over every p of the table
    x0 = np.stack(
        [np.ones_like(k), np.full_like(k, x), np.full_like(k, x**2), np.full_like(k, x**3)], axis=1
    ) * (np.arange(4) <= t.degree.to_numpy()[:, None])
    v = t[[f"v{j}{i}" for j in range(4) for i in range(j, 4)]].to_numpy()
    iu = np.triu_indices(4)
    m = np.zeros((len(t), 4, 4))
    m[:, iu[0], iu[1]] = v
    m[:, iu[1], iu[0]] = v
    h0 = np.einsum("ri,rij,rj->r", x0, m, x0)
    np.testing.assert_allclose(out.p, 2 * stats.t.sf(np.abs(k) / np.sqrt(1 + h0), t.df), rtol=1e-9)
    np.testing.assert_allclose(out.fdr_q, stats.false_discovery_control(out.p), rtol=1e-12)
    assert not out.extrapolated.any() and not out.no_norm.any()
    assert (out.norm_n == t.n).all()
    assert roi.get("p") is None  # input not modified


def test_fingerprint_mismatch_lists_fields(cohort, norms_file):
    nm = read_norms(norms_file)
    roi, _ = cohort.tables_at(30.0, np.zeros(len(cohort.keys)))
    other = Fingerprint(
        headmodel_sha256="1" * 64,
        method="eLORETA",
        orientation="fixed",
        lambda2=1 / 9,
        bands=DEFAULT_BANDS,
    )
    with pytest.raises(InputError, match="headmodel_sha256.*method") as exc:
        apply_norms(roi, nm, age=30.0, fingerprint=other)
    assert str(norms_file) in str(exc.value)


def test_condition_mismatch_error_or_flag(cohort, norms_file):
    nm = read_norms(norms_file)
    roi, _ = cohort.tables_at(30.0, np.zeros(len(cohort.keys)))
    with pytest.raises(InputError, match="condition") as exc:
        apply_norms(roi, nm, age=30.0, fingerprint=FP, condition="eyes open")
    assert str(norms_file) in str(exc.value)
    out = apply_norms(
        roi, nm, age=30.0, fingerprint=FP, condition="eyes open", allow_condition_mismatch=True
    )
    assert out.condition_mismatch.all() and np.isfinite(out.z).all()
    same = apply_norms(roi, nm, age=30.0, fingerprint=FP, condition="Eyes-Closed")
    assert not same.condition_mismatch.any()


def test_age_outside_range_error_or_flag(cohort, norms_file):
    nm = read_norms(norms_file)
    hi = nm.table.age_max.max()
    roi, _ = cohort.tables_at(30.0, np.zeros(len(cohort.keys)))
    with pytest.raises(InputError, match="outside the norms' age ranges") as exc:
        apply_norms(roi, nm, age=hi + 5, fingerprint=FP)
    assert str(norms_file) in str(exc.value)
    out = apply_norms(roi, nm, age=hi + 5, fingerprint=FP, allow_extrapolation=True)
    assert out.extrapolated.all()
    # extrapolation uses the model at the nearest covered age (clamped)
    at_edge = apply_norms(roi, nm, age=hi, fingerprint=FP)
    np.testing.assert_allclose(out.z, at_edge.z, rtol=1e-12)
    with pytest.raises(InputError, match="age"):
        apply_norms(roi, nm, age=float("nan"), fingerprint=FP)


def test_unknown_roi_is_flagged_unknown_band_is_error(cohort, norms_file):
    nm = read_norms(norms_file)
    roi, sen = cohort.tables_at(30.0, np.zeros(len(cohort.keys)))
    extra = roi.iloc[:3].assign(roi="BA99")
    out = apply_norms(pd.concat([roi, extra], ignore_index=True), nm, age=30.0, fingerprint=FP)
    assert out.no_norm.sum() == 3 and out.attrs["n_no_norm"] == 3
    assert out.z[out.no_norm].isna().all() and np.isfinite(out.z[~out.no_norm]).all()
    # norms rows absent from the analysis are fine
    part = apply_norms(roi.iloc[:5], nm, age=30.0, fingerprint=FP)
    assert len(part) == 5 and np.isfinite(part.z).all()
    with pytest.raises(InputError, match="bands.*gamma") as exc:
        apply_norms(
            pd.concat([roi, roi.iloc[:1].assign(band="gamma")]), nm, age=30.0, fingerprint=FP
        )
    assert str(norms_file) in str(exc.value)
    zs = apply_norms(sen, nm, age=30.0, fingerprint=FP, kind="sensor")
    assert np.isfinite(zs.z).all() and len(zs) == len(sen)


def test_chance_summary_counts(cohort, norms):
    # expected count of |z| > 1.96 under the null is 5 % of the tests (scipy.stats normal)
    k = len(cohort.keys)
    z = np.zeros(k)
    z[:4] = 6.0  # four strong deviations
    roi, _ = cohort.tables_at(30.0, z)
    out = apply_norms(roi, norms, age=30.0, fingerprint=FP)
    s = chance_summary(out)
    n = len(roi)
    assert s["n_tested"] == n
    assert s["expected_beyond_1.96"] == pytest.approx(0.05 * n, rel=1e-3)
    assert s["observed_beyond_1.96"] == int((out.z.abs() > 1.96).sum()) >= 4
    assert s["n_fdr"] == int((out.fdr_q <= 0.05).sum()) >= 4
    assert s["n_no_norm"] == 0
