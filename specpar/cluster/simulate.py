"""Synthetic cluster fields drawn from the locus, for tests and demonstrations:
members (single and unresolved binaries), field stars, and optionally evolved
members (giants, turn-off stars, blue stragglers), with the truth in ``sim_``
columns."""
from __future__ import annotations

import numpy as np
from astropy.table import Table

from specpar.core.bands import BAND_NAMES, band_index
from specpar.calib.tables import default_calibrations
from specpar.core.errors import InputError
from specpar.calib.extinction import DEFAULT_LAW, DEFAULT_RV
from specpar.calib.gaia_extinction import GAIA_BANDS, gaia_coefficients
from specpar.core.distance import dm_to_pc

from .locus import build_locus, mass_along, resolve_locus
from .options import DEFAULT_WIDTH
from .reddening import reddening_vectors

__all__ = ["simulate_cluster", "FIELD_KINDS"]

#: Kinds of simulated field stars.
FIELD_KINDS = ("broad", "dwarfs")
#: Photometric errors in U are this many times those of the other bands (common practice:
#: U is the faintest, least sensitive band of UBV work).
U_ERROR_FACTOR = 1.5
#: Simulated field dwarfs spread this far (mag) in distance modulus around the cluster.
FIELD_DM_SPREAD = 3.0
#: Giants are red-clump and RGB stars of the class III table, G8-K3 (numeric types).
GIANT_SPTNUM = (48.0, 53.0)
#: Turn-off stars and blue stragglers start from the locus between F0 and G0, turn-off stars
#: 0.4-1.5 mag brighter and 0.05-0.3 mag redder in every colour relative to V (subgiants),
#: stragglers 1-2.5 mag brighter at the same colour (merged binaries); illustrative values.
TURNOFF_SPTNUM = (30.0, 40.0)
TURNOFF_BRIGHTER, TURNOFF_REDDER = (0.4, 1.5), (0.05, 0.3)
STRAGGLER_BRIGHTER = (1.0, 2.5)
_BLUER_THAN_V = ("U", "B", "BP", "G")
_REDDER_THAN_V = ("Rc", "Ic", "J", "H", "Ks", "RP")
#: Members are drawn this far (mag) above the bright limit too, so that binaries (up to
#: 0.75 mag brighter than their primary) fill the bright end.
BINARY_ROOM = 0.8


def simulate_cluster(n_members=400, *, dm=10.0, ebv=0.3, binary_fraction=0.3, field_fraction=0.2,
                     field="dwarfs", bands=("U", "B", "V", "Ic"), magnitude="V",
                     mag_range=(8.0, 18.0), law=DEFAULT_LAW, rv=DEFAULT_RV, locus=None,
                     error_floor=0.01, error_scale=0.04, width=DEFAULT_WIDTH,
                     u_reddening="empirical", seed=0, locus_offset=0.0, n_giants=0, n_turnoff=0,
                     n_stragglers=0):
    """A synthetic cluster field drawn from the locus, for tests and demonstrations.

    Members are uniform in the ordinate's absolute magnitude (apparent range
    ``mag_range``); a fraction are unresolved binaries with q uniform on (0, 1).
    Field stars (``field_fraction`` of all stars) are either ``"broad"``:
    uniform in the ordinate over ``mag_range`` and uniform in every colour over
    the members' range widened by a quarter on each side, or ``"dwarfs"``:
    dwarfs spread over +-3 mag in distance modulus around the cluster with
    E(B-V) proportional to distance (many of these fall on the cluster
    sequence and cannot be told from members). Every band of every star is
    scattered by ``width`` (the intrinsic width of the sequence the fit
    assumes) and by its photometric error ``error_floor + error_scale *
    10**(0.4 (m_ord - faint limit))`` (1.5 times larger in U).

    Returns
    -------
    astropy.table.Table
        ``id``, magnitudes and ``e_<band>``, and the truth: ``sim_member``,
        ``sim_binary``, ``sim_q``, ``sim_sptnum``, ``sim_ebv``.
    """
    if field not in FIELD_KINDS:
        raise InputError(f"field must be 'broad' or 'dwarfs', not {field!r}")
    if magnitude not in bands:  # else the draw below never fills its quota
        raise InputError(f"magnitude {magnitude!r} must be one of the bands simulated "
                         f"({', '.join(bands)}); pass magnitude=...")
    rng = np.random.default_rng(seed)
    ib = [band_index(b) for b in bands]
    need = np.zeros(len(BAND_NAMES), bool)
    need[ib] = True
    loc = build_locus(resolve_locus(locus), need, float(locus_offset))
    io = band_index(magnitude)
    red = reddening_vectors(law, rv, u_reddening)
    n_field = int(round(n_members * field_fraction / max(1.0 - field_fraction, 1e-9)))
    spec = dict(loc=loc, io=io, red=red, mag_range=mag_range, rng=rng, rv=rv)
    parts = [_draw_members(n_members, dm, ebv, binary_fraction, 0.0, **spec)]
    if n_field and field == "dwarfs":
        parts.append(_draw_members(n_field, dm, ebv, 0.0, FIELD_DM_SPREAD, **spec))
    elif n_field:
        parts.append(_broad_field(n_field, parts[0][0], ib, io, mag_range, rng))
    extra = _evolved_stars(n_giants, n_turnoff, n_stragglers, dm, ebv, loc, io, red, rng)
    stars = _combine(parts, extra, n_members, ebv)
    sig = error_floor + error_scale * 10 ** (0.4 * (stars["mags"][:, io] - mag_range[1]))
    t = _table(stars, sig, bands, ib, width, rng)
    t.meta["simulation"] = dict(dm=dm, ebv=ebv, binary_fraction=binary_fraction, field=field,
                                field_fraction=field_fraction, law=law, rv=rv, seed=seed)
    return t


def _combine(parts, extra, n_members, ebv):
    """Members, field stars and evolved members in one set of arrays, with the truth."""
    mags, is_bin, q, spt, ei = (np.concatenate([p[i] for p in parts]) for i in range(5))
    if extra is not None:
        mags = np.concatenate([mags, extra[0]])
        is_bin, q = np.concatenate([is_bin, np.zeros(len(extra[0]), bool)]), np.concatenate([q, np.zeros(len(extra[0]))])
        spt, ei = np.concatenate([spt, extra[1]]), np.concatenate([ei, np.full(len(extra[0]), ebv)])
    member = np.arange(len(mags)) < n_members
    evolved = np.zeros(len(mags), bool)
    if extra is not None:
        evolved[-len(extra[0]):] = True
        member |= evolved
    return dict(mags=mags, is_bin=is_bin, q=q, spt=spt, ei=ei, member=member, evolved=evolved)


def _table(stars, sig, bands, ib, width, rng):
    """The simulated table: magnitudes scattered by their errors and the width, and the truth."""
    mags = stars["mags"]
    t = Table()
    t["id"] = [f"SIM-{i:05d}" for i in range(len(mags))]
    for b, i in zip(bands, ib):
        s = sig * (U_ERROR_FACTOR if b == "U" else 1.0)
        t[b] = np.round(mags[:, i] + np.hypot(s, width) * rng.standard_normal(len(mags)), 4)
        t[f"e_{b}"] = np.round(s, 4)
    t["sim_member"], t["sim_binary"], t["sim_q"] = stars["member"], stars["is_bin"], stars["q"]
    t["sim_sptnum"], t["sim_ebv"] = stars["spt"], stars["ei"]
    t["sim_evolved"] = stars["evolved"]
    return t


def _evolved_stars(n_giants, n_turnoff, n_stragglers, dm, ebv, loc, io, red, rng):
    """Members off the main sequence: red-clump/RGB giants (class III table, G8-K3),
    turn-off stars (the locus' blue part moved 0.4-1.5 mag brighter and 0.05-0.3 mag
    redder in every colour relative to V, as subgiants) and blue stragglers (the locus 0.5-2
    mag above the brightest drawn member is not used: they are put 1-2.5 mag above the
    single-star sequence at their colour, as merged binaries)."""
    lin, quad = red
    parts, spts = [], []
    if n_giants:
        g = default_calibrations().by_class["III"]
        s = rng.uniform(*GIANT_SPTNUM, n_giants)
        parts.append(np.where(loc.needed, g.evaluate(s).absmag, 0.0))
        spts.append(s)
    lo, hi = loc.sptnum[0], loc.sptnum[-1]
    blue = np.clip(np.array(TURNOFF_SPTNUM), lo, hi)
    for n, up, red_shift in ((n_turnoff, TURNOFF_BRIGHTER, TURNOFF_REDDER),
                             (n_stragglers, STRAGGLER_BRIGHTER, (0.0, 0.0))):
        if not n:
            continue
        s = rng.uniform(*blue, n)
        m = loc.at(s)
        m = m - rng.uniform(*up, n)[:, None] * loc.needed
        # redder: every band but V moves by a fraction of its distance from V in wavelength order
        dc = rng.uniform(*red_shift, n)[:, None]
        m = m + dc * (np.array([b in _BLUER_THAN_V for b in BAND_NAMES]) * 1.0
                      - np.array([b in _REDDER_THAN_V for b in BAND_NAMES]) * 1.0) * loc.needed
        parts.append(m)
        spts.append(s)
    if not parts:
        return None
    m = np.concatenate(parts)
    return m + dm + lin * ebv + quad * ebv ** 2, np.concatenate(spts)


def _star_coefficients(lin, absm, ebv, rv, loc):
    """Per star A_band / E(B-V): the law's, with the Gaia bands' for each star's own (BP-RP)_0
    (:func:`specpar.calib.gaia_extinction.gaia_coefficients`) when BP and RP are simulated."""
    out = np.broadcast_to(np.asarray(lin, dtype=float), absm.shape).copy()
    iB, iR = band_index("BP"), band_index("RP")
    if loc.needed[iB] and loc.needed[iR]:
        x0 = absm[:, iB] - absm[:, iR]
        out[:, [band_index(b) for b in GAIA_BANDS]] = gaia_coefficients(np.nan_to_num(x0), ebv, rv)
    return out


def _draw_members(n, dm, ebv, binary_fraction, dm_spread, *, loc, io, red, mag_range, rng, rv):
    """n stars on the locus (binaries with flat q), uniform in the ordinate's absolute
    magnitude, kept inside ``mag_range``; ``dm_spread`` > 0 scatters them in distance
    (E(B-V) proportional to distance) as field dwarfs."""
    lin, quad = red
    got, have = [], 0
    while have < n:  # rejection sampling in batches
        m = 4 * n + 50  # a batch large enough to fill the quota in one or two rounds
        dmi = dm + rng.uniform(-dm_spread, dm_spread, m)
        ei = ebv * dm_to_pc(dmi) / dm_to_pc(dm)
        target = rng.uniform(mag_range[0] - dmi - lin[io] * ei - BINARY_ROOM, mag_range[1] - dmi - lin[io] * ei)
        order = np.argsort(loc.absmag[:, io])
        spt = np.interp(target, loc.absmag[order, io], loc.sptnum[order], left=np.nan, right=np.nan)
        is_bin = rng.uniform(size=m) < binary_fraction
        q = np.where(is_bin, rng.uniform(0, 1, m), 0.0)
        M2 = loc.at(np.where(is_bin, loc.spt_of_mass(q * mass_along(loc.cal, spt)), np.nan))
        flux = 10 ** (-0.4 * loc.at(spt)) + np.nan_to_num(10 ** (-0.4 * M2), nan=0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            absm = -2.5 * np.log10(flux)
            mags = absm + dmi[:, None] + _star_coefficients(lin, absm, ei, rv, loc) * ei[:, None] + quad * ei[:, None] ** 2
            keep = (mags[:, io] >= mag_range[0]) & (mags[:, io] <= mag_range[1]) & np.isfinite(spt)
        got.append((mags[keep], is_bin[keep], q[keep], spt[keep], ei[keep]))
        have += int(keep.sum())
    return tuple(np.concatenate([g[i] for g in got])[:n] for i in range(5))


def _broad_field(n, member_mags, ib, io, mag_range, rng):
    """n stars uniform in the ordinate and in each colour over the members' widened range."""
    mags = np.zeros((n, member_mags.shape[1]))
    mags[:, io] = rng.uniform(*mag_range, n)
    for i in ib:
        if i == io:
            continue
        col = member_mags[:, i] - member_mags[:, io]
        lo, hi = col.min(), col.max()
        pad = 0.25 * (hi - lo)
        mags[:, i] = mags[:, io] + rng.uniform(lo - pad, hi + pad, n)
    nan = np.full(n, np.nan)
    return mags, np.zeros(n, bool), np.zeros(n), nan, nan
