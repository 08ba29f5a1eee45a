"""One label against another: the difference of their mean levels per region, band and polar
bin, and of their overall and A-weighted levels over a band range both support, each with its
90 % interval (:func:`flyover.acoustics.statistics.difference_interval`).

The two labels may come from one campaign (their shared calibration cancels) or from two
(each campaign's shared term counts). Passes the sign-off rejected are left out.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.statistics import difference_interval
from flyover.campaign import Campaign
from flyover.io.figures import comparison_figure, save_figure
from flyover.io.results.comparison import (COMPARED_LEVELS, COMPARED_OVERALL, COMPARISON_FIGURE,
                                           FOLDER, pair_folder)
from flyover.io.results.levels import LEVELS
from flyover.io.results.signoff import SIGNOFF, signoff_statuses
from flyover.model.errors import FlyoverInputError, suggest
from flyover.pipeline._bins import pass_bins
from flyover.pipeline._overall import common_band_range, overall_table


@dataclass(frozen=True)
class Side:
    """One side of a comparison: a label's passes and their band levels.

    Attributes
    ----------
    name : str
        How the tables and figure name it (the label, with the campaign's folder when two
        campaigns are compared).
    levels : dict of str -> DataFrame
        Each used pass's ``levels.csv``.
    shared_db : float
        The campaign's shared calibration uncertainty.
    results : Path
        The campaign's results folder.
    """

    name: str
    levels: dict
    shared_db: float
    results: Path


def label_side(campaign: Campaign, label: str, results, *, name: str | None = None,
               source: str = "") -> Side:
    """The passes of ``label`` in a campaign's results folder (rejected ones left out);
    ``source`` names the campaign file in the error when no pass has the label."""
    labels = sorted({p.label for p in campaign.passes.values()})
    names = [n for n, p in campaign.passes.items() if p.label == label]
    if not names:
        raise FlyoverInputError(f"no pass is labelled '{label}'", source,
                                "a label of the campaign: " + ", ".join(labels),
                                hint=suggest(label, labels))
    out = Path(results)
    statuses = signoff_statuses(out) if SIGNOFF.path(out).exists() else {}
    used = [n for n in names if statuses.get(n) != "rejected"]
    return Side(name or label, {n: LEVELS.read(out / n) for n in used},
                campaign.analysis.uncertainty.calibration_shared_db, out)


def _difference_rows(a: dict, b: dict, value: str, keys: list[str], *, shared: tuple,
                     shared_cancels: bool) -> list[dict]:
    """Per key and polar bin, the difference of B's and A's per-pass bin means."""
    def stacked(tables):
        frames = [pass_bins(t, value, keys).assign(_pass=n) for n, t in tables.items()]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
            columns=keys + ["polar_bin_deg", value, "uncertainty_db", "_pass"])
    sa, sb = stacked(a), stacked(b)
    by = keys + ["polar_bin_deg"]
    rows = []
    for key in sorted(set(map(tuple, sa[by].to_numpy())) | set(map(tuple, sb[by].to_numpy()))):
        ga = sa[(sa[by] == pd.Series(key, index=by)).all(axis=1)]
        gb = sb[(sb[by] == pd.Series(key, index=by)).all(axis=1)]
        d = difference_interval(ga[value], gb[value], 0.90, ua_db=ga["uncertainty_db"],
                                ub_db=gb["uncertainty_db"], shared_db=shared[0],
                                shared_b_db=shared[1], shared_cancels=shared_cancels)
        row = dict(zip(by, key))
        row.update({k: d[k] for k in ("mean_a_db", "mean_b_db", "n_a", "n_b",
                                      "difference_db", "dof", "differs")})
        row["ci90_low_db"], row["ci90_high_db"] = d["ci_low_db"], d["ci_high_db"]
        row["passes_a"] = " ".join(sorted(ga.loc[np.isfinite(ga[value].astype(float)),
                                                 "_pass"]))
        row["passes_b"] = " ".join(sorted(gb.loc[np.isfinite(gb[value].astype(float)),
                                                 "_pass"]))
        rows.append(row)
    return rows


def compare(a: Side, b: Side) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The band and the overall comparison tables of B against A."""
    same = a.results == b.results
    # Within one campaign the shared calibration cancels; across two, each side's counts.
    shared = (a.shared_db, b.shared_db)
    bands = pd.DataFrame(_difference_rows(a.levels, b.levels, "level_db",
                                          ["region", "band_hz"], shared=shared,
                                          shared_cancels=same),
                         columns=COMPARED_LEVELS.column_names)
    # Overall levels over one band range both labels support, so that like is compared with
    # like (each label's own range may differ).
    ranges = common_band_range(list(a.levels.values()) + list(b.levels.values()))
    parts = []
    for value, quantity in (("overall_db", "overall"), ("a_weighted_db", "A-weighted")):
        sides = [{n: overall_table(t, ranges, shared_db=s.shared_db)
                  for n, t in s.levels.items()} for s in (a, b)]
        rows = _difference_rows(*sides, value, ["region", "band_range_hz"], shared=shared,
                                shared_cancels=same)
        parts += [dict(r, quantity=quantity) for r in rows if r["band_range_hz"]]
    overall = pd.DataFrame(parts, columns=COMPARED_OVERALL.column_names)
    return bands, overall


def comparison_folder(out_dir: Path, a: Side, b: Side) -> Path:
    """Where a comparison's files go: ``OUT/comparisons/A--B``."""
    return Path(out_dir) / FOLDER / pair_folder(a.name, b.name)


def write_comparison(out_dir: Path, a: Side, b: Side) -> Path:
    """Compare B with A and write the tables and the figure; the folder is returned."""
    bands, overall = compare(a, b)
    folder = comparison_folder(out_dir, a, b)
    COMPARED_LEVELS.write(folder, bands)
    COMPARED_OVERALL.write(folder, overall)
    save_figure(comparison_figure(overall, a.name, b.name), COMPARISON_FIGURE.path(folder))
    return folder
