"""The words of a pass's sign-off: a finding per rule a pass breaks, and the pass's status."""

from __future__ import annotations

from dataclasses import asdict, dataclass

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
