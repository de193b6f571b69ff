"""The cautions every output carries (README, CLI, report, provenance)."""

CAUTIONS = (
    (
        "Source estimates come from a template head (fsaverage) and 19 scalp electrodes. With so "
        "few "
        "electrodes and no individual anatomy the maps are blurred on a centimetre scale: a peak "
        "marks "
        "a region, not a gyrus, and neighbouring areas share much of their signal."
    ),
    (
        "z-scores are only as good as the norms behind them: the reference population (age, sex, "
        "health, medication), its size and its recording conditions (eyes closed or open, montage, "
        "amplifier, cleaning) must match this recording. With many ROIs and bands some |z| > 1.96 "
        "are expected by chance alone (about 5 in 100)."
    ),
    (
        "This software supports assessment and research. It is not a diagnostic device and its "
        "output is not a diagnosis."
    ),
    (
        "Decisions about training or treatment rest with licensed practitioners acting under the "
        "rules "
        "that apply where they work, taking the whole clinical picture into account."
    ),
)

SHORT = (
    "Caution: template head + 19 electrodes = centimetre-scale blur; z-scores are only as good "
    "as the norms; not a diagnostic device; training decisions rest with licensed "
    "practitioners."
)
