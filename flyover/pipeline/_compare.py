"""One label against another: the difference of their mean levels per region, band and polar
bin, and of their overall and A-weighted levels over a band range both support, each with its
90 % interval (:func:`flyover.acoustics.statistics.difference_interval`).

The two labels may come from one campaign (their shared calibration cancels) or from two
(each campaign's shared term counts), read from the campaigns' results folders or from a
columnar store (:mod:`flyover.io.results.store`). Passes the sign-off rejected are left out.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.statistics import difference_interval
from flyover.campaign import Campaign
from flyover.io.figures import comparison_figure, save_figure
from flyover.io.results import store
from flyover.io.results.comparison import (COMPARED_LEVELS, COMPARED_METRIC_NAMES,
                                           COMPARED_METRICS, COMPARED_OVERALL, COMPARISON_FIGURE,
                                           FOLDER, pair_folder)
from flyover.io.results.event_metrics import EVENT_METRICS
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
        The campaign's results folder (or its folder in a store): two sides with the same
        one share their calibration.
    metrics : DataFrame
        Each used pass's ``event_metrics.csv`` row.
    """

    name: str
    levels: dict
    shared_db: float
    results: Path
    metrics: pd.DataFrame


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
    metrics = pd.concat([EVENT_METRICS.read(out / n).assign(**{"pass": n}) for n in used],
                        ignore_index=True) if used else pd.DataFrame()
    return Side(name or label, {n: LEVELS.read(out / n) for n in used},
                campaign.analysis.uncertainty.calibration_shared_db, out, metrics)


def store_side(folder, campaign: str, label: str, *, name: str | None = None) -> Side:
    """The passes of ``label`` of one campaign of a store (rejected ones left out)."""
    found = store.query(folder, "SELECT DISTINCT label FROM levels WHERE campaign = $c",
                        c=campaign)["label"].tolist()
    if label not in found:
        raise FlyoverInputError(f"campaign '{campaign}' of the store has no label '{label}'",
                                str(folder), "one of: " + ", ".join(sorted(found)),
                                hint=suggest(label, found))
    rejected = set(store.query(folder, "SELECT pass FROM signoff WHERE campaign = $c AND "
                                       "status = 'rejected'", c=campaign)["pass"])

    def rows(table):
        frame = store.query(folder, f"SELECT * FROM {table} WHERE campaign = $c AND "
                                    "label = $l", c=campaign, l=label)
        return frame[~frame["pass"].isin(rejected)]
    levels = rows("levels")
    shared = store.query(folder, "SELECT value FROM provenance WHERE campaign = $c AND "
                                 "key = 'calibration_shared_db'", c=campaign)["value"]
    return Side(name or f"{campaign}.{label}",
                {p: g.reset_index(drop=True) for p, g in levels.groupby("pass", sort=True)},
                float(shared.iloc[0]), Path(folder) / campaign, rows("metrics"))


def store_folder(path) -> Path | None:
    """The store a folder is or holds (a results folder keeps its campaign's in ``store/``)."""
    for folder in (Path(path), Path(path) / "store"):
        if store.stored_campaigns(folder):
            return folder
    return None


def sides_from_sources(sources, labels, *, load_campaign) -> tuple[Side, Side, Path]:
    """Labels A and B from campaign files, results folders or stores, and where their
    comparison goes.

    One campaign file, or two (A's then B's), compare from the campaigns' results folders,
    into the first one's. Otherwise every source is a store (a results folder stands for its
    ``store/``; a campaign file for its store) and a label is ``CAMPAIGN:LABEL``, or a plain
    label that one campaign alone has; the comparison goes into the current folder.
    """
    paths = [Path(s) for s in sources]
    label_a, label_b = labels
    if len(paths) <= 2 and all(p.is_file() for p in paths):
        first = load_campaign(paths[0])
        second = load_campaign(paths[-1]) if len(paths) == 2 else first
        two = second is not first
        a = label_side(first, label_a, first.output, source=str(paths[0]),
                       name=f"{paths[0].stem}.{label_a}" if two else None)
        b = label_side(second, label_b, second.output, source=str(paths[-1]),
                       name=f"{paths[-1].stem}.{label_b}" if two else None)
        return a, b, first.output
    pool: dict[str, Path] = {}
    for path in paths:
        folder = load_campaign(path).store.folder if path.is_file() else store_folder(path)
        if folder is None:
            raise FlyoverInputError("not a campaign file, a results folder or a store",
                                    str(path), "a campaign's YAML file, or a folder holding "
                                    "NAME/levels.parquet (a store) or store/", "neither")
        for name in store.stored_campaigns(folder):
            if name in pool and pool[name] != folder:
                raise FlyoverInputError(f"campaign '{name}' is in two stores", str(folder),
                                        "each campaign name once", f"also in {pool[name]}",
                                        "give one of the stores, or rename a campaign "
                                        "(store.name in its campaign file)")
            pool[name] = folder

    def side(text: str) -> Side:
        campaign, _, label = text.rpartition(":")
        if campaign:
            if campaign not in pool:
                raise FlyoverInputError(f"no campaign '{campaign}' in the stores given",
                                        text, "one of: " + ", ".join(sorted(pool)),
                                        hint=suggest(campaign, list(pool)))
            return store_side(pool[campaign], campaign, label)
        having = [n for n, f in pool.items()
                  if label in set(store.query(f, "SELECT DISTINCT label FROM levels WHERE "
                                                 "campaign = $c", c=n)["label"])]
        if len(having) != 1:
            raise FlyoverInputError(f"label '{label}' names no single campaign", text,
                                    "CAMPAIGN:LABEL, the campaign one of: "
                                    + ", ".join(sorted(pool)),
                                    f"{len(having)} campaigns with it"
                                    + (f" ({', '.join(having)})" if having else ""))
        return store_side(pool[having[0]], having[0], label)
    return side(label_a), side(label_b), Path.cwd()


def _difference_rows(a: dict, b: dict, value: str, keys: list[str], *, shared: tuple,
                     shared_cancels: bool) -> list[dict]:
    """Per key and polar bin, the difference of B's and A's per-pass bin means."""
    def stacked(tables):
        frames = [pass_bins(t, value, keys).assign(_pass=n) for n, t in tables.items()]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
            columns=keys + ["polar_bin_deg", value, "uncertainty_db", "_pass"])
    sa, sb = stacked(a), stacked(b)
    by = keys + ["polar_bin_deg"]
    # Each side split by key once (rows in their order; a key with a NaN part matches no row).
    groups_a, groups_b = (dict(iter(t.groupby(by, sort=False))) for t in (sa, sb))
    rows = []
    for key in sorted(set(map(tuple, sa[by].to_numpy())) | set(map(tuple, sb[by].to_numpy()))):
        ga = groups_a.get(key, sa.iloc[:0])
        gb = groups_b.get(key, sb.iloc[:0])
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


def _metric_rows(a: Side, b: Side, *, same: bool) -> list[dict]:
    """Per single-event metric, the difference of B's and A's pass means; each pass's stated
    uncertainty is its campaign's shared calibration alone."""
    rows = []
    for metric in COMPARED_METRIC_NAMES:
        va = a.metrics[metric].to_numpy(float) if len(a.metrics) else np.array([])
        vb = b.metrics[metric].to_numpy(float) if len(b.metrics) else np.array([])
        d = difference_interval(va, vb, 0.90, ua_db=np.full(len(va), a.shared_db),
                                ub_db=np.full(len(vb), b.shared_db), shared_db=a.shared_db,
                                shared_b_db=b.shared_db, shared_cancels=same)
        row = {"metric": metric, **{k: d[k] for k in ("mean_a_db", "mean_b_db", "n_a", "n_b",
                                                       "difference_db", "dof", "differs")}}
        row["ci90_low_db"], row["ci90_high_db"] = d["ci_low_db"], d["ci_high_db"]
        for side, values, key in ((a, va, "passes_a"), (b, vb, "passes_b")):
            row[key] = " ".join(sorted(side.metrics["pass"][np.isfinite(values)])) \
                if len(values) else ""
        rows.append(row)
    return rows


def compare(a: Side, b: Side) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """The band, overall and single-event metric comparison tables of B against A."""
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
    metrics = pd.DataFrame(_metric_rows(a, b, same=same), columns=COMPARED_METRICS.column_names)
    return bands, overall, metrics


def comparison_folder(out_dir: Path, a: Side, b: Side) -> Path:
    """Where a comparison's files go: ``OUT/comparisons/A--B``."""
    return Path(out_dir) / FOLDER / pair_folder(a.name, b.name)


def write_comparison(out_dir: Path, a: Side, b: Side) -> Path:
    """Compare B with A and write the tables and the figure; the folder is returned."""
    bands, overall, metrics = compare(a, b)
    folder = comparison_folder(out_dir, a, b)
    COMPARED_LEVELS.write(folder, bands)
    COMPARED_OVERALL.write(folder, overall)
    COMPARED_METRICS.write(folder, metrics)
    save_figure(comparison_figure(overall, a.name, b.name), COMPARISON_FIGURE.path(folder))
    return folder
