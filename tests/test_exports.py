"""Open-format exports: STC (MNE), GIfTI (nibabel), NIfTI (MNI152), BIDS derivatives."""

import json

import mne
import nibabel as nib
import numpy as np
import pytest

from sourcelab import exports
from sourcelab.errors import InputError
from sourcelab.headmodel import load_head_model

MODEL = load_head_model()


@pytest.fixture(scope="module")
def result(demo_result):
    return demo_result


def test_stc_reads_back_with_mne(result, tmp_path):
    stems = exports.export_stc(result, tmp_path)
    assert len(stems) == 2 * len(result.bands.names)
    # MNE-Python is the reference reader of its own format
    stc = mne.read_source_estimate(f"{stems[2]}-lh.stc", subject="fsaverage")
    # only cortical vertices are sources: the medial wall is absent from the estimate
    np.testing.assert_array_equal(
        np.concatenate([stc.vertices[0], stc.vertices[1] + 10242]), MODEL.vertno
    )
    np.testing.assert_allclose(
        stc.data[:, 0], result.source_map(result.bands.names[2]), rtol=1e-6
    )  # .stc stores float32, our maps are float32
    stc_rel = mne.read_source_estimate(f"{stems[-1]}-rh.stc", subject="fsaverage")
    np.testing.assert_allclose(
        stc_rel.data[:, 0], result.source_map(result.bands.names[-1], "relative"), rtol=1e-6
    )
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temp folder left


def test_gifti_round_trip(result, tmp_path):
    paths = exports.export_gifti(result, tmp_path, measures=("absolute",))
    assert [p.name for p in paths] == ["absolute.L.func.gii", "absolute.R.func.gii"]
    for h, p in enumerate(paths):
        img = nib.load(p)
        assert [d.meta["Name"] for d in img.darrays] == list(result.bands.names)
        data = np.stack([d.data for d in img.darrays])
        surf = MODEL.to_surface(result.source_abs)[:, h * 10242 : (h + 1) * 10242]
        np.testing.assert_array_equal(data, surf)
        # no value on the medial wall (not cortex, not a source)
        assert np.isnan(data[:, ~MODEL.surface.cortex[h * 10242 : (h + 1) * 10242]]).all()


def test_nifti_alpha_peaks_occipital(result, tmp_path):
    # the invented demo person's alpha generators sit at the occipital poles (sourcelab/demo.py);
    # the occipital pole lies at MNI y ~ -100 and BA17's centroid at (+-11, -89, 2) (Lancaster et
    # al. 2000, Hum Brain Mapp 10:120-131, Talairach-atlas Brodmann volume, via DATA-SOURCES.md)
    band = result.bands.names.index("alpha")
    for res in (2, 3):
        path = exports.export_nifti(
            result, tmp_path / f"r{res}", measures=("absolute",), resolution=res
        )[band]
        img = nib.load(path)
        assert np.allclose(np.abs(np.diag(img.affine)[:3]), res)
        data = np.asarray(img.dataobj)
        peak = nib.affines.apply_affine(img.affine, np.unravel_index(np.argmax(data), data.shape))
        assert peak[1] < -60, peak
        assert (data > 0).sum() > 20000 / res**3  # cortex is filled, not just a few voxels
        # outside the brain stays empty (corner voxel)
        assert data[0, 0, 0] == 0


def test_bids_derivatives(result, tmp_path):
    sub = exports.export_bids_derivatives(result, tmp_path, "../../evil id#7")
    assert sub == tmp_path / "derivatives" / "sourcelab" / "sub-evilid7"
    desc = json.loads((sub.parent / "dataset_description.json").read_text())
    # BIDS 1.9 derivatives: DatasetType "derivative" and GeneratedBy are required
    assert desc["DatasetType"] == "derivative" and desc["GeneratedBy"][0]["Name"] == "sourcelab"
    files = sorted(p.name for p in (sub / "eeg").iterdir())
    # BIDS entity order (hemi before space, res/den after it) and the templateflow names of
    # fsaverage5 (space-fsaverage, den-10k); res is a label (no unit), explained in the sidecar
    assert "sub-evilid7_hemi-L_space-fsaverage_den-10k_desc-absolute_power.func.gii" in files
    vol = "sub-evilid7_space-MNI152NLin2009aSym_res-2_desc-absolutealpha_power"
    assert f"{vol}.nii.gz" in files
    assert json.loads((sub / "eeg" / f"{vol}.json").read_text())["Resolution"].startswith("2 mm")
    assert "sub-evilid7_desc-roi_power.tsv" in files
    assert sum(f.endswith(".nii.gz") for f in files) == 2 * len(result.bands.names)
    import pandas as pd

    roi = pd.read_csv(sub / "eeg" / "sub-evilid7_desc-roi_power.tsv", sep="\t")
    assert len(roi) == len(result.roi_table)
    # units once, in the column sidecar, not on every row
    side = json.loads((sub / "eeg" / "sub-evilid7_desc-roi_power.json").read_text())
    assert list(side) == list(roi.columns) and "unit" not in roi.columns
    assert "µV" in side["measure"]["Levels"]["absolute"] and side["z"]["Units"]
    assert not list(tmp_path.parent.glob("evil*"))  # nothing escaped the root
    with pytest.raises(InputError):
        exports.export_bids_derivatives(result, tmp_path, "../..")


def test_failed_export_leaves_nothing(result, tmp_path):
    with pytest.raises(ValueError, match="measure"):
        exports.export_nifti(result, tmp_path, measures=("absolute", "loudness"), resolution=3)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(("na_rep", "float_format"), [("", "%.6g"), ("n/a", "%.4g")])
def test_table_text_matches_pandas_to_csv(na_rep, float_format):
    # reference: pandas' own DataFrame.to_csv (the writer the tables used before), byte for byte,
    # over every column type the result tables hold, missing values, and fields that need quotes
    import pandas as pd

    from sourcelab.tsv import table_text

    t = pd.DataFrame(
        {
            "name": pd.array(["BA1", None, 'say "hi"', "a\tb", "", "é"], dtype="str"),
            "value": [1.0, np.nan, -0.0, np.inf, 1.23456789e-7, 123456789.0],
            "n": np.arange(6, dtype=np.int64) - 2,
            "flag": [True, False, True, True, False, False],
            "maybe": pd.array([True, None, False, None, True, False], dtype="boolean"),
            "f32": np.float32([0.1, 2.5, np.nan, 3.0, -1e-3, 7.0]),
        }
    )
    expected = t.to_csv(sep="\t", index=False, na_rep=na_rep, float_format=float_format)
    assert table_text(t, na_rep=na_rep, float_format=float_format) == expected
    # a column type it does not format itself (categorical) goes to pandas: still identical
    t["cat"] = pd.Categorical(["x", "y", "x", None, "y", "x"])
    expected = t.to_csv(sep="\t", index=False, na_rep=na_rep, float_format=float_format)
    assert table_text(t, na_rep=na_rep, float_format=float_format) == expected
    assert table_text(t.iloc[:0]) == t.iloc[:0].to_csv(sep="\t", index=False, float_format="%.6g")
