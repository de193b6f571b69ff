"""Rebuild ``groupings.json``: lobes and functional networks as groupings of Brodmann areas.

Run with ``python -m atlases.build_groupings`` (offline).  The definitions below are the
single source; the JSON is what ships and what run time reads.  Every grouping carries its
citation; citations recalled without the paper at hand are marked "from memory" in a code
comment beside them (never in the shipped text, which users see).  ROIs may overlap
(an area can belong to several networks).  Each network exists per hemisphere and bilaterally.
"""

from __future__ import annotations

import argparse
import json

from ._buildtools import HERE, update_manifest, write_text

OUT = HERE / "groupings.json"

#: Every Brodmann area of the Talairach atlas (Lancaster et al. 2000) is in exactly one lobe.
LOBES = {
    "description": "Lobes as groupings of the Talairach-atlas Brodmann areas; every area in "
    "exactly "
    "one lobe (majority lobe where an area crosses a boundary).",
    "citation": "Lobe level of the Talairach Daemon hierarchy, Lancaster et al. 2000, Hum Brain "
    "Mapp "
    "10:120-131 (limbic lobe = cingulate + parahippocampal areas; insula = 'sub-lobar' "
    "BA13); common practice.",  # from memory
    "groups": {
        "frontal": [4, 6, 8, 9, 10, 11, 44, 45, 46, 47],
        "parietal": [1, 2, 3, 5, 7, 39, 40, 43],
        "temporal": [20, 21, 22, 37, 38, 41, 42],
        "occipital": [17, 18, 19],
        "limbic": [23, 24, 25, 27, 28, 29, 30, 31, 32, 33, 34, 35, 36],
        "insula": [13],
    },
}

NETWORKS = {
    "description": "Brodmann-area networks: published networks as groupings of whole Brodmann "
    "areas (coarse: an area joins a network when the cited work places its core "
    "there), each named as its source names it or by its anatomy. Per "
    "hemisphere and bilateral; networks overlap. For networks defined by resting "
    "connectivity use the yeo7 atlas (Yeo et al. 2011).",
    "citation": "See each network.",
    "groups": {
        "default-mode": {
            "areas": [9, 10, 21, 23, 24, 28, 29, 30, 31, 32, 35, 36, 39],
            "citation": "Buckner, Andrews-Hanna & Schacter 2008, Ann N Y Acad Sci 1124:1-38, "
            # Table 2 region list: from memory
            "Table 2 region list (vMPFC 24/10/32, dMPFC 9/10/32, PCC-retrosplenial "
            "23/31/29/30, IPL 39, LTC 21, hippocampal formation 28/35/36). "
            "BA40 omitted: the Talairach BA40 is the whole supramarginal gyrus, "
            "mostly outside the network (Yeo et al. 2011).",
        },
        "salience": {
            "areas": [13, 24, 32, 47],
            "citation": "Seeley et al. 2007, J Neurosci 27:2349-2356: dorsal anterior cingulate "
            "(24/32) and orbital fronto-insular cortex (13, 47).",  # areas from memory
        },
        "frontoparietal": {
            "areas": [9, 40, 46],
            "citation": "Central-executive network, Seeley et al. 2007, J Neurosci 27:2349-2356 "
            "(dorsolateral prefrontal 9/46, lateral parietal 40); Vincent et al. 2008, "
            "J Neurophysiol 100:3328-3342.",  # areas from memory
        },
        "dorsal-attention": {
            "areas": [7, 8],
            "citation": "Corbetta & Shulman 2002, Nat Rev Neurosci 3:201-215 (frontal eye field in "
            "BA8, intraparietal sulcus / superior parietal lobule in BA7); Fox et al. "
            "2006, PNAS 103:10046-10051. MT+ (BA19/37 border) left to "  # from memory
            "the visual network.",
        },
        "sensorimotor": {
            "areas": [1, 2, 3, 4, 6],
            # Biswal et al.: from memory
            "citation": "Biswal et al. 1995, Magn Reson Med 34:537-541 (resting motor network); "
            "primary motor 4, somatosensory 3/1/2, premotor/SMA 6 are "
            "common practice.",
        },
        "visual": {
            "areas": [17, 18, 19],
            "citation": "Striate 17 (V1), parastriate 18 (V2), peristriate 19 (V3+): Brodmann 1909 "
            "- common practice.",
        },
        "perisylvian": {
            "areas": [22, 41, 42, 44, 45],
            "citation": "Cortex around the Sylvian fissure: transverse temporal 41/42, superior "
            "temporal 22, inferior frontal opercular and triangular 44/45 (Catani, "
            "Jones & ffytche 2005, Ann Neurol 57:8-16, 'perisylvian' networks; Hickok "
            "& Poeppel 2007, Nat Rev Neurosci 8:393-402).",  # from memory
        },
        "temporo-amygdala-orbitofrontal": {
            "areas": [11, 25, 28, 34, 35, 36, 38],
            "citation": "Orbitofrontal 11, subgenual cingulate 25, entorhinal/parahippocampal "
            "28/34/35/36, temporal pole 38: the temporo-amygdala-orbitofrontal "
            "network of Catani, Dell'Acqua & Thiebaut de Schotten 2013, Neurosci "
            "Biobehav Rev 37:1724-1737, with the parahippocampal areas of its "
            "parahippocampal-retrosplenial network.",  # from memory
        },
    },
}


def build() -> str:
    text = json.dumps({"lobes": LOBES, "networks": NETWORKS}, indent=2) + "\n"
    digest = write_text(OUT, text)
    update_manifest({OUT.name: digest})
    return digest


def main(argv: list[str] | None = None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    print(f"wrote {OUT.name} ({build()[:12]})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
