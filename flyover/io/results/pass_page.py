"""``pass.html``: one pass's self-contained page (conditions, clocks, metrics, data quality,
track, maps, spectra, tones), linked from the campaign report."""

NAME = "pass.html"
