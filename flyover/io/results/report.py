"""``report.html``: the campaign's self-contained report."""

NAME = "report.html"
# Carried by the report and the viewer, as by the README.
CAUTION = ("Outdoor flight tests and their measurements must follow the applicable "
           "noise-certification standards, aviation rules and local regulations; flyover defers "
           "to them and is no substitute for them. Flying near people and microphones needs the "
           "operator's own risk assessment.")
