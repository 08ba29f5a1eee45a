"""``report.html``: the campaign's self-contained report."""

NAME = "report.html"
