"""The cautions every output carries (README, CLI, report, provenance)."""

CAUTIONS = (
    "sourcelab supports assessment and research; it is not a diagnostic device.",
    "Source estimates use a template head (fsaverage) and 19 electrodes: expect centimetre-scale "
    "blur, and treat a region as the most plausible generator, not a located one.",
    "z-scores are only as good as the norms behind them: their population, age range, equipment "
    "and recording conditions must match the person assessed.",
    "A statistical deviation is not a diagnosis or a treatment target by itself; decisions about "
    "training rest with licensed practitioners, under local rules, who weigh symptoms and history.",
)

SHORT = ("Caution: template head + 19 electrodes = centimetre-scale blur; z-scores are only as good "
         "as the norms; not a diagnostic device; training decisions rest with licensed "
         "practitioners.")
