"""``specpar calibrations``: list the shipped calibration tables and their sources."""
from __future__ import annotations

__all__ = ["register"]


def run(args) -> int:
    from specpar.calib.tables import default_calibrations
    cals = default_calibrations()
    for lc, cal in cals.by_class.items():
        lo, hi = cal.sptnum_range
        print(f"{lc:>4}  {cal.name}: {cal.title}")
        print(f"      types {lo:g}-{hi:g} (O0=0 ... M0=60); bands {' '.join(cal.bands)}")
        for ref in cal.references:
            print(f"      ref: {ref}")
    return 0


def register(sub) -> None:
    p = sub.add_parser("calibrations", help="list the calibration tables and their sources")
    p.set_defaults(func=run)
