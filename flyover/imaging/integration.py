"""Source power integration: region powers from summed maps and the unit sources' summed maps.

The region's summed map divided by the summed map of a unit point source at the region centre that
went through the identical chain (same window, weights, diagonal removal, geometry), times the unit
source's band power; with several regions the leakage of each region's unit source into the others'
sums is solved for as well.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# The leakage solve amplifies relative errors of the unit sources' couplings (a few per cent:
# sources off the region centres, interpolation) by up to the condition number. The levels claim
# about 0.1-0.5 dB, so beyond 10 (a 3 % coupling error becoming 30 %, over 1 dB) the regions
# cannot be told apart and are left empty.
MAX_CONDITION = 10.0


def region_powers(coupling, measured) -> tuple[np.ndarray, np.ndarray]:
    """Source power integration over several regions, with their mutual leakage solved for.

    Parameters
    ----------
    coupling : ndarray, shape (n_bands, n_regions, n_regions)
        ``coupling[b, i, j]``: region i's summed map of a unit point source at region j's
        centre, divided by that unit source's band power (the unit sources go through the same
        chain as the measurement).
    measured : ndarray, shape (n_bands, n_regions)
        Each region's summed measured map.

    Returns
    -------
    powers : ndarray, shape (n_bands, n_regions)
        Band power at 1 m of each region's sources, from ``M_i = sum_j C_ij P_j``. With one
        region, or no leakage, this is plain source power integration ``M_i / C_ii``. NaN where
        the system's condition number passes ``MAX_CONDITION`` (regions that cannot be told
        apart) or a power comes out non-positive.
    total : ndarray, shape (n_bands,)
        All regions together: one unknown over their union (summed maps over the unit sources'
        mean summed map over the union), well posed even where the regions are not separable.
    """
    c = np.asarray(coupling, float)
    m = np.asarray(measured, float)
    out = np.full(m.shape, np.nan)
    for b in range(len(c)):
        if np.all(np.isfinite(c[b])) and np.linalg.cond(c[b]) < MAX_CONDITION:
            out[b] = np.linalg.solve(c[b], m[b])
    union = c.sum(axis=1).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        total = np.where(union > 0, m.sum(axis=1) / union, np.nan)
    return np.where(out > 0, out, np.nan), np.where(total > 0, total, np.nan)


# A region's level is given only if moving any region's unit source within its region and its
# half-power main lobe (:func:`shift_distances_m`) changes it by at most this: the coupling of
# a real source, wherever the map cannot tell it from the centre, is then close enough to the
# unit source's.
SHIFT_TOLERANCE_DB = 1.0
# The four directions of the shifts, in body axes: forward, back, starboard, port.
SHIFT_DIRECTIONS = np.array([[1.0, 0.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 1.0, 0.0],
                             [0.0, -1.0, 0.0]])
# A neighbour's unit source is shifted to its -1 dB contour (about 0.6 of the half-power
# radius): a source anywhere inside it makes a map whose peak a window cannot place apart from
# the centre's, so the leakage solve must hold for it. A region's own unit source moves a
# quarter wavelength: moved farther in a region narrower than its lobe, its level changes by
# the region's own edge loss (1-1.5 dB for a source well placed at the centre), which is how
# the region was drawn, not leakage.
SHIFT_LOBE_LEVEL = 10 ** -0.1


def shift_distances_m(offsets_m, lobe, wavelength_m, half_extent_m):
    """How far the stability test moves a region's unit source, per direction and band.

    Parameters
    ----------
    offsets_m : ndarray, shape (n_points, 3)
        The region's grid points relative to its centre, body axes.
    lobe : ndarray, shape (n_points, n_bands)
        The unit source's map on them relative to its peak.
    wavelength_m : ndarray, shape (n_bands,)
    half_extent_m : ndarray, shape (4,)
        Centre to edge along each of ``SHIFT_DIRECTIONS``.

    Returns
    -------
    own : ndarray, shape (4, n_bands)
        The shift that tests the region's own level: a quarter wavelength, or to the region's
        edge if nearer.
    reach : ndarray, shape (4, n_bands)
        The shift that tests the other regions' levels: the farthest region point along the
        direction inside the unit source's -1 dB contour (``SHIFT_LOBE_LEVEL``; the whole
        region where the contour covers it), never less than ``own``. A quarter wavelength
        alone is a small fraction of the main lobe at flyover heights (a twelfth of the -3 dB
        width at a height of three apertures) and barely probes where a strong neighbour sits.
    """
    along = np.asarray(offsets_m, float) @ SHIFT_DIRECTIONS.T                 # (n_p, 4)
    inside = np.asarray(lobe, float) >= SHIFT_LOBE_LEVEL                        # (n_p, n_b)
    reach = np.where(inside[:, None, :], along[:, :, None], 0.0).max(axis=0, initial=0.0)
    own = np.minimum(np.asarray(wavelength_m, float)[None, :] / 4,
                     np.asarray(half_extent_m, float)[:, None])
    return own, np.maximum(reach, own)


# A region not resolved from its neighbours still gets its level when it holds at least this
# many times their power together (10 dB): their leakage into it is then small.
DOMINANCE = 10.0


def shift_changes_db(shifted, measured, powers, fixed=0.0, *, tested=None) -> np.ndarray:
    """The largest change of each region's level over re-solves with moved unit sources.

    Parameters
    ----------
    shifted : ndarray, shape (n_shifts, n_bands, n_regions, n_regions)
        Couplings as in :func:`region_powers`, each with one region's unit source moved.
    measured : ndarray, shape (n_bands, n_regions)
    powers : ndarray, shape (n_bands, n_regions)
        The solve with the unit sources at the region centres.
    fixed : ndarray, shape (n_bands, n_regions), or float
        A part of each region's level that the shifts do not move (a deconvolving method's
        integrated residual), added to both solves before comparing.
    tested : bool array, shape (n_shifts, n_regions), optional
        Which regions' levels each shift tests (default: all).

    Returns
    -------
    ndarray, shape (n_bands, n_regions)
        dB; inf where a moved solve fails (ill-conditioned or non-positive) and the centred one
        does not.
    """
    worst = np.zeros(np.shape(powers))
    if tested is None:
        tested = np.ones((len(shifted), worst.shape[-1]), bool)
    for c, which in zip(shifted, tested):
        moved = region_powers(c, measured)[0]
        with np.errstate(divide="ignore", invalid="ignore"):
            change = np.abs(10.0 * np.log10((moved + fixed) / (powers + fixed)))
        change = np.where(np.isfinite(change), change, np.inf)
        worst = np.maximum(worst, np.where(which, change, 0.0))
    return worst


@dataclass(frozen=True)
class RegionVerdict:
    """Whether a region's level can be given, per band (arrays of shape (n_bands,)).

    Attributes
    ----------
    resolved : bool array
        The region is resolved from every other: each pair's midpoint lies outside both unit
        sources' half-power main lobes (the array planning's criterion, in this window).
    dominant : bool array
        Not resolved, but holding at least ``DOMINANCE`` times the power of the regions it is
        not resolved from.
    stability_db : float array
        How far its level moves when a unit source moves within its half-power main lobe and
        region (:func:`shift_distances_m`), or with the
        method's variant, :class:`flyover.imaging.chain.BandPowers`).
    valid : bool array
        The level is given: finite, within ``SHIFT_TOLERANCE_DB`` of its moved solves, and
        resolved or dominant (dominant only where dominance gives levels: not over raised
        microphones).
    note : list of str
        Why not, or 'dominant, not resolved'; '' for a resolved, valid level.
    """

    resolved: np.ndarray
    dominant: np.ndarray
    stability_db: np.ndarray
    valid: np.ndarray
    note: list


DOMINANT_NOTE = "dominant, not resolved"
RAISED_DOMINANT_NOTE = ("dominant, not resolved: not given over raised microphones (the "
                        "ground's image shares the unresolved regions' maps)")


def region_verdicts(powers, changes_db, resolved_pairs, *,
                    by_dominance: bool = True) -> list[RegionVerdict]:
    """Per region: resolved, dominant and valid, from the solved powers (n_bands, n_regions),
    their shift changes (same shape) and the pairwise resolution (n_bands, n_regions,
    n_regions, bool, symmetric; the diagonal is ignored).

    ``by_dominance=False`` gives no level by dominance alone (over raised microphones): there,
    on 20 simulated passes with inputs wrong by the default uncertainties
    (benchmarks/bench_uncertainty_coverage.py), the dominant, unresolved levels lay within
    their 90 % intervals for 52 % (16 of 31), 1.6 dB high on average, against 90 % of 100 and
    0.2 dB over ground plates: each region's map there also holds the ground path's image,
    whose power the leakage solve of two unresolved regions cannot apportion."""
    p = np.asarray(powers, float)
    n_b, n_r = p.shape
    pairs = np.asarray(resolved_pairs, bool) | np.eye(n_r, dtype=bool)[None]
    out = []
    for i in range(n_r):
        resolved = pairs[:, i].all(axis=1)
        # Regions that solved to nothing (NaN) beside a finite one count as holding nothing.
        others = np.where(~pairs[:, i], np.nan_to_num(p, nan=0.0), 0.0).sum(axis=1)
        finite = np.isfinite(p[:, i]) & (p[:, i] > 0)
        dominant = ~resolved & finite & (np.nan_to_num(p[:, i]) >= DOMINANCE * others)
        steady = changes_db[:, i] <= SHIFT_TOLERANCE_DB
        valid = finite & steady & (resolved | (dominant & by_dominance))
        notes = []
        for b in range(n_b):
            if not finite[b]:
                notes.append("regions cannot be told apart in this band (leakage solve "
                             "ill-conditioned or not positive)")
            elif not steady[b]:
                # An infinite change: a shifted solve (or the variant) failed or found no power.
                moves = (f"moves {changes_db[b, i]:.1f} dB" if np.isfinite(changes_db[b, i])
                         else "cannot be solved")
                notes.append(f"unstable: the level {moves} when a unit source shifts within its "
                             "main lobe and region (or with the method's variant)")
            elif dominant[b]:
                notes.append(DOMINANT_NOTE if by_dominance else RAISED_DOMINANT_NOTE)
            elif not resolved[b]:
                notes.append("not resolved: inside another region's half-power main lobe, "
                             "neither dominating by 10 dB")
            else:
                notes.append("")
        out.append(RegionVerdict(resolved, dominant, changes_db[:, i], valid, notes))
    return out
