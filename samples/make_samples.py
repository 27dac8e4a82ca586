"""Regenerate the invented demo data in this folder (deterministic).

Scenario: the made-up "Southern Lantern Survey" (IDs SLS-...) observed four
made-up fields (Lantern-1..4): a spectroscopic survey with UBVIcJHKs photometry,
a follow-up list with trigonometric parallaxes, a handful of pulsating
variables, and one star cluster field.

The stars are invented: types, distances and reddening are drawn at random and
photometry is computed from specpar's own calibration tables and extinction
coefficients, with scatter and noise. They illustrate the tool; they are not
reference values for any test.

    python samples/make_samples.py
"""
from pathlib import Path

import numpy as np
import pandas as pd

from specpar.core.bands import BAND_NAMES, band_index
from specpar.calib.tables import default_calibrations
from specpar.calib.extinction import band_coefficients
from specpar.core.sptype import parse_sptypes

HERE = Path(__file__).resolve().parent
TYPES = [
    "O7V", "O9.5V", "B0.5V", "B2V", "B3IV", "B5V", "B8V", "A0V", "A2IV", "A5V", "F0V", "F2IV",
    "F5V", "F8V", "G0V", "G2V", "G5IV", "G8V", "K0V", "K3V", "K5V", "M0V", "M2V", "M4V",
    "G8III", "K0III", "K1III", "K2III", "K4III", "M0III", "M2III", "B1III", "A0III",
    "B1Ib", "B8Iab", "A2Ia", "F5Ib", "G2Iab", "K2Ib", "M2Iab", "K3-4III", "B2.5IV-V", "G8III-IV",
]
BANDS_USED = ("U", "B", "V", "Ic", "J", "H", "Ks")


def main(seed: int = 20261201) -> None:
    rng = np.random.default_rng(seed)
    cals = default_calibrations()
    parsed = parse_sptypes(TYPES)
    vals = cals.evaluate(parsed["sptnum"], parsed["lc_bright"], parsed["lc_faint"])
    n = len(TYPES)
    R = band_coefficients("F99", 3.1)
    absmag = vals.absmag + rng.normal(0, 0.3, (n, 1))
    # apparent V between 5 and 13.5 mag; nearby stars unreddened
    v_app = rng.uniform(5.0, 13.5, n)
    ebv = np.round(rng.uniform(0.0, 1.1, n), 3)
    dist = 10 ** ((v_app - absmag[:, band_index("V")] - R[band_index("V")] * ebv) / 5 + 1)
    dist = np.where(dist < 15, rng.uniform(15, 80, n), np.where(dist > 6000, rng.uniform(2000, 6000, n), dist))
    ebv = np.where(dist < 100, 0.0, ebv)
    rows = []
    for i, sptype in enumerate(TYPES):
        row = {"id": f"SLS-{101 + i:04d}", "field": f"Lantern-{1 + i % 4}", "sptype": sptype}
        for b in BANDS_USED:
            j = band_index(b)
            m = absmag[i, j] + 5 * np.log10(dist[i] / 10) + ebv[i] * R[j]
            err = 0.01 if b in ("B", "V") else 0.02 if b in ("U", "Ic") else 0.03
            row[b] = round(float(m + rng.normal(0, err)), 3) if np.isfinite(m) else None
            row[f"e_{b}"] = err if np.isfinite(m) else None
        rows.append(row)
    frame = pd.DataFrame(rows)
    bad = pd.DataFrame([
        {"id": "SLS-0901", "field": "Lantern-1", "sptype": "K?III?", "B": 12.4, "e_B": 0.02, "V": 11.3, "e_V": 0.02},
        {"id": "SLS-0902", "field": "Lantern-2", "sptype": "DA3", "B": 14.1, "e_B": 0.02, "V": 14.2, "e_V": 0.02},
        {"id": "SLS-0903", "field": "Lantern-3", "sptype": "G5V", "B": "n/a", "e_B": 0.02, "V": None, "e_V": 0.02},
        {"id": "SLS-0904", "field": "Lantern-4", "sptype": "A3V", "B": 10.52, "V": 10.31},
        {"id": "SLS-0905", "field": "Lantern-1", "sptype": "F5V", "B": 99.9, "e_B": 0.02, "V": 11.8, "e_V": -0.01},
        {"id": "SLS-0906", "field": "Lantern-2", "sptype": "", "B": 9.9, "e_B": 0.02, "V": 9.1, "e_V": 0.02},
        {"id": "SLS-0907", "field": "Lantern-3", "sptype": "K2", "B": 13.35, "e_B": 0.03, "V": 12.2, "e_V": 0.03},
        {"id": "SLS-0908", "field": "Lantern-4", "sptype": "B9V", "B": 8.10, "e_B": 0.01, "V": 8.65, "e_V": 0.01},
    ])
    out = pd.concat([frame, bad], ignore_index=True)[list(frame.columns)]
    frame = frame.copy()
    out.to_csv(HERE / "survey.csv", index=False)
    print(f"wrote {len(out)} rows to survey.csv")
    parallaxes(rng, frame, dist)
    pulsators(rng)
    cluster()


def parallaxes(rng, frame, dist) -> None:
    """Parallaxes for the survey's first 30 stars: mostly consistent, with a few
    deliberate problems (a hidden companion, a wrong class, bad or negative values)."""
    sel = frame.iloc[:30].copy()
    true_plx = 1000.0 / dist[:30]
    e_plx = np.round(rng.uniform(0.02, 0.25, 30), 3)
    plx = true_plx + rng.normal(0, e_plx)
    # SLS-0105: an unresolved equal-mass companion makes it 0.75 mag brighter than its type says
    sel.loc[4, ["U", "B", "V", "Ic", "J", "H", "Ks"]] = sel.loc[4, ["U", "B", "V", "Ic", "J", "H", "Ks"]] - 0.75
    # SLS-0110: really a giant, classified as a dwarf
    plx[9] = plx[9] / 8.0
    plx[12] = -0.35  # a faint star with a negative parallax (a valid measurement)
    sel["plx"] = pd.Series(np.round(plx, 4), index=sel.index).astype(object)
    sel["e_plx"] = e_plx
    sel.loc[20, "e_plx"] = None  # error missing
    sel.loc[21, "plx"] = "n/a"  # not a number
    sel.to_csv(HERE / "survey_parallaxes.csv", index=False)
    print(f"wrote {len(sel)} rows to survey_parallaxes.csv")


def pulsators(rng) -> None:
    """Invented classical Cepheids (mean V and Ic magnitudes, periods in days)."""
    from specpar.calib.cepheid_pl import load_pl_calibration
    rel = load_pl_calibration().relations
    rows = []
    for i, (period, mode, sptype) in enumerate([(5.4, "F", "F6Ib"), (9.8, "F", "G0Ib"), (15.3, "F", "G2Iab"),
                                                (31.0, "F", "K0Iab"), (3.9, "1O", "F6II"), (7.2, "F", ""),
                                                (-2.0, "F", "F8Ib"), (11.1, "X", "G1Ib")]):
        logp = np.log10(period) if period > 0 else 1.0
        if mode == "1O":  # first overtone: the fundamental period is longer
            logp = np.log10(period / 0.71)
        mv, mw = rel["V"].zp + rel["V"].slope * (logp - 1), rel["W_VI"].zp + rel["W_VI"].slope * (logp - 1)
        vi0 = (mv - mw) / 2.45
        d = rng.uniform(800, 4000)
        ebv = rng.uniform(0.1, 0.9)
        v = mv + 5 * np.log10(d / 10) + 3.1 * ebv
        ic = v - vi0 - 1.3 * ebv
        rows.append({"id": f"SLS-V{31 + i:02d}", "field": f"Lantern-{1 + i % 4}", "sptype": sptype,
                     "period_d": period, "pmode": mode, "V": round(v, 3), "e_V": 0.02,
                     "Ic": round(ic, 3), "e_Ic": 0.02})
    pd.DataFrame(rows).to_csv(HERE / "pulsators.csv", index=False)
    print(f"wrote {len(rows)} rows to pulsators.csv")


def cluster() -> None:
    """An invented open-cluster field: members, unresolved binaries and field stars."""
    from specpar.cluster import simulate_cluster
    t = simulate_cluster(300, dm=9.4, ebv=0.42, binary_fraction=0.3, field_fraction=0.2,
                         bands=("U", "B", "V", "Ic"), mag_range=(9.0, 17.5), seed=20261201)
    t = t[[c for c in t.colnames if not c.startswith("sim_")]]
    t["id"] = [f"LCL-{i + 1:04d}" for i in range(len(t))]
    for c in t.colnames:
        if t[c].dtype.kind == "f":
            t[c] = np.round(t[c], 3)
    t.write(HERE / "cluster_field.csv", format="ascii.csv", overwrite=True)
    print(f"wrote {len(t)} rows to cluster_field.csv")


if __name__ == "__main__":
    main()
