"""Regenerate the invented demo survey in this folder (deterministic).

The stars are made up: types, distances and reddening are drawn at random, and
their photometry is computed from specpar's own calibration tables and
extinction coefficients, with scatter and noise. They illustrate the tool; they
are not reference values for any test.

    python samples/make_survey.py
"""
from pathlib import Path

import numpy as np
import pandas as pd

from specpar.bands import BAND_NAMES, band_index
from specpar.calibration import default_calibrations
from specpar.extinction import band_coefficients
from specpar.sptype import parse_sptypes

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
    out.to_csv(HERE / "survey.csv", index=False)
    print(f"wrote {len(out)} rows to survey.csv")


if __name__ == "__main__":
    main()
