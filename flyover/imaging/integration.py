"""Source power integration: region powers from summed maps and the unit sources' summed maps.

The region's summed map divided by the summed map of a unit point source at the region centre that
went through the identical chain (same window, weights, diagonal removal, geometry), times the unit
source's band power; with several regions the leakage of each region's unit source into the others'
sums is solved for as well.
"""

from __future__ import annotations

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
