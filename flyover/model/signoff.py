"""The words of a pass's sign-off: a finding per rule a pass breaks, and the pass's status."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

ACCEPTED, FLAGGED, REJECTED = "accepted", "flagged", "rejected"
# What a finding does to its pass: the worst outcome sets the status.
FLAG, REJECT = "flag", "reject"


@dataclass(frozen=True)
class Finding:
    """One rule a pass breaks.

    Attributes
    ----------
    rule : str
        What is held, e.g. ``"mean crosswind"``.
    measured : float or str
        The pass's value (a number where the rule has one).
    limit : float or str
        What the rule allows.
    unit : str
    outcome : str
        ``"flag"`` or ``"reject"``.
    text : str
        One line for the report.
    """

    rule: str
    measured: float | str
    limit: float | str
    unit: str
    outcome: str
    text: str

    def as_dict(self) -> dict:
        return asdict(self)


def status_of(findings) -> str:
    """``"rejected"`` when a finding rejects, ``"flagged"`` when one flags, else
    ``"accepted"``."""
    outcomes = {f.outcome for f in findings}
    return REJECTED if REJECT in outcomes else FLAGGED if FLAG in outcomes else ACCEPTED


def label_findings(heights: dict, speeds: dict, labels: dict, limits) -> dict[str, list]:
    """Passes whose height or speed is off their label's median by more than the tolerances
    (labels of two passes or more): ``{pass: [Finding, ...]}``. ``heights`` and ``speeds`` map
    pass names to metres and m/s, ``labels`` to labels; ``limits`` is a
    :class:`flyover.campaign.SignoffLimits`. `flyover check` prints the same as warnings,
    the sign-off flags them."""
    out: dict[str, list] = {n: [] for n in heights}
    for label in set(labels.values()):
        names = [n for n in heights if labels[n] == label]
        if not label or len(names) < 2:
            continue
        for values, tol, what, unit in ((heights, limits.label_height_tolerance_pct, "height",
                                         "m"),
                                        (speeds, limits.label_speed_tolerance_pct, "speed",
                                         "m/s")):
            median = float(np.median([values[n] for n in names]))
            for n in names:
                off = 100.0 * abs(values[n] - median) / median
                if off > tol:
                    out[n].append(Finding(
                        f"{what} against the label", round(values[n], 1),
                        f"{median:.1f} +- {tol:g} %", unit, FLAG,
                        f"{what} {values[n]:.1f} {unit} is {off:.0f} % off the median "
                        f"{median:.1f} {unit} of label '{label}' (limit {tol:g} %): averaging "
                        "it with the label's other passes mixes conditions"))
    return out
