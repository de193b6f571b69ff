"""sourcelab: source-level quantitative EEG on the fsaverage template.

A 19-channel 10-20 resting recording becomes sLORETA band power per cortical source,
Brodmann-style areas and networks, and z-scores against norms the user supplies or builds.

The front door::

    import sourcelab
    result = sourcelab.analyze("rec.edf", age=34, norms="norms.tsv", condition="eyes closed")
    result.summary(); result.candidates; result.figures(); result.write("out/")
    norms = sourcelab.read_norms("norms.tsv")
    sourcelab.build_norms("cohort/", "participants.tsv", out="norms.tsv", condition="eyes closed")
    atlas = sourcelab.load_atlas("brodmann")

sourcelab supports assessment and research; it is not a diagnostic device.
"""

__version__ = "0.2.0"

#: Bumped whenever a change alters the numbers the pipeline produces.  Norms and results carry it
#: in their fingerprint, so numbers from different pipelines are never compared.
PIPELINE_VERSION = 6
# 2 (0.2.0): cortex-only sources; relative power over 1-45 Hz; learned rejection, ocular correction
# 3: default bands of the IFCN recommendation (Babiloni et al. 2020): delta 1-4, theta 4-8,
#    alpha 8-13, beta 13-30, gamma 30-h_freq Hz (was beta 12-25 and a 25-30 Hz band)
# 4: candidates name the area of highest template-match evidence around each peak (was the area
#    holding the peak); probability model refitted for it; border_mm signed, to the named area
# 5: probability model refitted on the maps candidate lists show (named over all areas; maps named
#    after an unresolvable area left out of the fit), as sourcelab.trust.naming.listed_naming
# 6: candidate lists ordered by focal evidence, |peak z| x the fit of the deviation map to the
#    named area's focal template (was |peak z|); candidates carry the fit

#: name -> (module, attribute) of the front door; imported on first use so that
#: ``import sourcelab`` stays fast.
_FRONT_DOOR = {
    "analyze": ("sourcelab.analysis", "analyze"),
    "AnalysisConfig": ("sourcelab.config", "AnalysisConfig"),
    "AnalysisResult": ("sourcelab.result", "AnalysisResult"),
    "read_norms": ("sourcelab.norms", "read_norms"),
    "build_norms": ("sourcelab.cohort", "build_norms"),
    "load_atlas": ("sourcelab.rois", "load_atlas"),
}

__all__ = ["PIPELINE_VERSION", "__version__", *_FRONT_DOOR]


def __getattr__(name):
    try:
        module, attr = _FRONT_DOOR[name]
    except KeyError:
        raise AttributeError(f"module 'sourcelab' has no attribute {name!r}") from None
    import importlib

    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_FRONT_DOOR))
