"""Complete-null simulation of norms: how often does a person who *is* normal get flagged?

Invented Gaussian data (no signal simulation, no people): ``q`` quantities whose transformed
values follow an age curve plus correlated Gaussian scatter (one shared factor per group of
quantities, e.g. a band x measure, with within-group correlation ``rho``).  A reference cohort of
``n_controls`` builds norms with the real builder (:func:`sourcelab.norms.fit_norms`:
regression, degree chosen by leave-one-out, robust rule); held-out people drawn from the same
model are scored (a) with the plain z of :func:`sourcelab.norms.apply_norms` and (b) with the
predictive t of :mod:`sourcelab.norms.predictive` (per-row ``(XᵀX)⁻¹``).  Reported per route:
the fraction of held-out people with at least one FDR-flagged row (BH at 5 %, nominal under the
complete null: at most 5 %, Benjamini & Yekutieli 2001 for positively dependent tests) and the
fraction of rows with |z| > 1.96 (nominal 5 %).

References
----------
Benjamini Y, Hochberg Y (1995).  J R Stat Soc B 57:289-300.
Benjamini Y, Yekutieli D (2001).  The control of the false discovery rate in multiple testing
under dependency.  Ann Stat 29:1165-1188 (from memory).
Crawford JR, Garthwaite PH (2006).  Neuropsychology 20:259-271 (from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def _keys(n_rois: int, n_bands: int, kind: str) -> pd.DataFrame:
    rows = []
    for m in ("absolute", "relative"):
        for b in range(n_bands):
            for r in range(n_rois):
                if kind == "roi":
                    rows.append(("roi", "sim", f"R{r}", "left", f"b{b}", m))
                else:
                    rows.append(("sensor", "n/a", f"C{r}", "n/a", f"b{b}", m))
    return pd.DataFrame(rows, columns=["kind", "atlas", "name", "hemisphere", "band", "measure"])


def _table(keys: pd.DataFrame, tvals: np.ndarray, kind: str) -> pd.DataFrame:
    from ..norms.transforms import get_transform, transform_for_measure

    vals = np.empty(len(keys))
    for m in ("absolute", "relative"):
        sel = (keys["measure"] == m).to_numpy()
        vals[sel] = get_transform(transform_for_measure(m)).inverse(tvals[sel])
    if kind == "roi":
        return pd.DataFrame(
            {
                "atlas": keys["atlas"],
                "roi": keys["name"],
                "hemisphere": keys["hemisphere"],
                "band": keys["band"],
                "measure": keys["measure"],
                "value": vals,
            }
        )
    return pd.DataFrame(
        {"channel": keys["name"], "band": keys["band"], "measure": keys["measure"], "value": vals}
    )


def complete_null(
    *,
    kind: str = "roi",
    n_rois: int = 115,
    n_bands: int = 5,
    n_controls: int = 60,
    n_reps: int = 50,
    n_heldout: int = 20,
    rho: float = 0.5,
    age_range=(18.0, 65.0),
    seed: int = 0,
    degree="auto",
) -> dict:
    """Run the complete-null simulation.

    Parameters
    ----------
    kind : {"roi", "sensor"}
        Table kind (ROI-like: ``n_rois`` x bands x 2 measures rows; sensor-like: use
        ``n_rois=19``).
    n_rois : int
        Number of ROIs (or channels) per table.
    n_bands : int
        Number of bands per ROI.
    n_controls : int
        Reference cohort size per replicate.
    n_reps : int
        Independent reference cohorts (norms fits).
    n_heldout : int
        Held-out people scored against each cohort's norms.
    rho : float
        Within-group (band x measure) correlation of the quantities.
    age_range : (float, float)
        Ages of the invented people, years.
    seed : int
        Seed of the random generator.
    degree : int or "auto"
        Regression degree passed to the builder.

    Returns
    -------
    dict
        ``n_rows``, ``n_people``, and for ``plain`` and ``predictive``: ``any_fdr`` (fraction
        of people with >= 1 FDR-flagged row), ``beyond_1_96`` (fraction of rows).
    """
    from ..provenance import Fingerprint
    from ..norms.fit import fit_norms
    from ..norms.predictive import leverage, predictive_t, row_xtx_inverse
    from ..norms.zscore import apply_norms, bh_adjust

    rng = np.random.default_rng(seed)
    keys = _keys(n_rois, n_bands, kind)
    q = len(keys)
    group = (keys["band"] + keys["measure"]).factorize()[0]
    n_g = group.max() + 1
    rel = (keys["measure"] == "relative").to_numpy()
    fp = Fingerprint(
        headmodel_sha256="0" * 64,
        method="sLORETA",
        orientation="fixed",
        lambda2=1 / 9,
        bands=tuple((f"b{b}", float(b), b + 1.0) for b in range(n_bands)),
    )
    counts = {"plain": [0, 0, 0], "predictive": [0, 0, 0]}  # people flagged, beyond, rows
    lo, hi = np.log10(age_range[0]), np.log10(age_range[1])
    for rep in range(n_reps):
        a = np.where(rel, rng.uniform(-2.0, -0.5, q), rng.uniform(0.5, 2.0, q))
        b = rng.uniform(-1.0, 1.0, q)
        c = rng.uniform(-0.6, 0.2, q)
        sd = np.where(rel, rng.uniform(0.25, 0.5, q), rng.uniform(0.12, 0.3, q))

        def draw(ages):
            x = np.log10(ages)[:, None]
            f = rng.standard_normal((len(ages), n_g))[:, group]
            e = rng.standard_normal((len(ages), q))
            return a + b * x + c * x * x + sd * (np.sqrt(rho) * f + np.sqrt(1 - rho) * e)

        ages = 10 ** rng.uniform(lo, hi, n_controls)
        y = draw(ages)
        entries = []
        for i in range(n_controls):
            t = _table(keys, y[i], kind)
            entries.append(
                (
                    f"s{i}",
                    float(ages[i]),
                    t if kind == "roi" else None,
                    t if kind == "sensor" else None,
                )
            )
        fit = fit_norms(entries, fingerprint=fp, condition="sim", degree=degree)
        nt = fit.norms.table
        v = row_xtx_inverse(fit)
        h_ages = rng.uniform(ages.min(), ages.max(), n_heldout)
        yh = draw(h_ages)
        row_of = {
            k: i
            for i, k in enumerate(
                zip(
                    *(nt[col] for col in ("kind", "atlas", "name", "hemisphere", "band", "measure"))
                )
            )
        }
        idx = np.array([row_of[tuple(k)] for k in keys.itertuples(index=False)])
        for i in range(n_heldout):
            t = _table(keys, yh[i], kind)
            z = apply_norms(
                t, fit.norms, age=float(h_ages[i]), fingerprint=fp, condition="sim", kind=kind
            )
            counts["plain"][0] += int(z["fdr"].any())
            counts["plain"][1] += int((np.abs(z["z"]) > 1.96).sum())
            counts["plain"][2] += len(z)
            rows = nt.iloc[idx]
            deg = rows["degree"].to_numpy()
            h0 = leverage(v[idx], deg, np.full(q, h_ages[i]))
            zp = z["z"].to_numpy()
            mean = yh[i] - zp * rows["sd"].to_numpy()  # model mean recovered from z
            res = predictive_t(
                yh[i], mean, rows["sd"].to_numpy(), n=rows["n"].to_numpy(), degree=deg, h0=h0
            )
            counts["predictive"][0] += int((bh_adjust(res["p"]) <= 0.05).any())
            counts["predictive"][1] += int((np.abs(res["z_equivalent"]) > 1.96).sum())
            counts["predictive"][2] += q
    n_people = n_reps * n_heldout
    out = {"kind": kind, "n_rows": q, "n_people": n_people, "n_controls": n_controls, "rho": rho}
    for k, (flag, beyond, rows) in counts.items():
        out[k] = {"any_fdr": flag / n_people, "beyond_1_96": beyond / rows}
    return out
