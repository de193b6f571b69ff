"""Scripts that rebuild the shipped atlas labels for the fsaverage5 template (source checkout only).

They write into the package's one data folder, ``sourcelab/data`` (read at run time by
:mod:`sourcelab.rois`, hash-checked against its ``MANIFEST.json``): run from the repository root
``python -m atlases.build_yeo7``, then ``build_brodmann`` and ``build_groupings``.  Provenance,
licences, method and coverage: ``README.md``.
"""
