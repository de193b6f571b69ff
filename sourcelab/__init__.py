"""sourcelab: source-level quantitative EEG on the fsaverage template.

A 19-channel 10-20 resting recording becomes sLORETA band power per cortical source,
Brodmann-style areas and networks, and z-scores against norms the user supplies or builds.

sourcelab supports assessment and research; it is not a diagnostic device.
"""

__version__ = "0.1.0"

#: Bumped whenever a change alters the numbers the pipeline produces.  Norms and results carry it
#: in their fingerprint, so numbers from different pipelines are never compared.
PIPELINE_VERSION = 2

__all__ = ["__version__", "PIPELINE_VERSION"]
