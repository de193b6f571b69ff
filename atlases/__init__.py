"""Shipped per-source atlas labels for the fsaverage5 template (data package ``sourcelab.atlases``).

Data files (read at run time by :mod:`sourcelab.rois`, hash-checked against ``MANIFEST.json``) and
the scripts that rebuild them (``python -m sourcelab.atlases.build_yeo7``, ``build_brodmann``,
``build_groupings``); provenance, licences, method and coverage in ``README.md``.
"""
