"""Pieces of flyover's self-contained HTML pages (the campaign report, the pass pages):
figures embedded as WebP, tables, numbers that never read 'nan', and the page itself."""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.io.results import FigureFile

IMAGE_QUALITY = 60  # WebP quality of the embedded figures (the PNGs keep full detail)
IMAGE_WIDTH = 1600  # pixels at most: wider figures are scaled down for the page

STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#2b3440;background:#faf8f4;
max-width:1180px;margin:0 auto;padding:24px 28px;line-height:1.45}
h1{font-size:1.7em;margin-bottom:0}h2{border-bottom:2px solid #d08a1f;padding-bottom:4px;
margin-top:2.2em}h3{color:#1f7a78}table{border-collapse:collapse;font-size:.85em;margin:10px 0}
th,td{border:1px solid #ddd6c8;padding:3px 7px;text-align:right}th{background:#efe9dd}
td.t,th.t{text-align:left}tr.flag td,td.flag{background:#fbe3d2}h4{margin:14px 0 2px}
img{max-width:100%;border:1px solid #ddd6c8;background:white;margin:6px 0}
.caution{border-left:5px solid #b03a2e;background:#fff4ef;padding:10px 14px}
.muted{color:#6b7380;font-size:.9em}.warn{color:#b03a2e}
nav a{margin-right:14px;color:#1f7a78}
"""

# No request leaves the page: images are data, styles inline, no script.
_POLICY = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def html_document(title: str, body: str) -> str:
    """A whole page: its head (title, the style, a policy that lets nothing load) and body."""
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{_POLICY}">
<title>{html.escape(title)}</title>
<style>{STYLE}</style></head><body>
{body}
</body></html>
"""


def embedded_image(path: Path, alt: str) -> str:
    """A figure embedded as lossy WebP on white, at most ``IMAGE_WIDTH`` wide (the PNG
    stays in the results folder): about a quarter of the PNG's bytes, which keeps the demo's
    report under 5 MB."""
    if not Path(path).exists():
        return f'<p class="muted">({html.escape(alt)}: not available)</p>'
    from PIL import Image  # only the steps that write pages need it
    with Image.open(path) as image:
        flat = Image.new("RGB", image.size, "white")
        rgba = image.convert("RGBA")
        flat.paste(rgba, mask=rgba.getchannel("A"))
    if flat.width > IMAGE_WIDTH:
        flat = flat.resize((IMAGE_WIDTH,
                            round(flat.height * IMAGE_WIDTH / flat.width)),
                           Image.Resampling.LANCZOS)
    buffer = io.BytesIO()
    flat.save(buffer, "WEBP", quality=IMAGE_QUALITY, method=6)
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/webp;base64,{data}">'


def figure_html(folder: Path, figure: FigureFile) -> str:
    """A declared figure of a results folder, with its caption (:func:`embedded_image`)."""
    return embedded_image(figure.path(folder), figure.caption)


def number_text(value, fmt: str = ".1f", missing: str = "missing") -> str:
    """A number rounded for the report, or the words for a missing one (never 'nan')."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return missing
    return format(v, fmt) if np.isfinite(v) else missing


def lae_text(lae_db, complete, shortfall_db) -> str:
    """An LAE for the report: a cut-short one says it is a lower bound and by about how much."""
    if bool(complete) or not np.isfinite(float(lae_db)):
        return number_text(lae_db, missing="none")
    short = float(shortfall_db) if shortfall_db is not None else np.inf
    return number_text(lae_db) + (f" (cut short: about {short:.1f} dB more)" if np.isfinite(short)
                           else " (cut short: a lower bound)")


def table_html(df: pd.DataFrame, flag_column: str | None = None, max_rows: int = 400) -> str:
    if df is None or len(df) == 0:
        return '<p class="muted">(no rows)</p>'
    rows = []
    cols = [c for c in df.columns if c != flag_column]
    head = "".join(f'<th class="{"t" if df[c].dtype == object else ""}">{html.escape(str(c))}</th>'
                   for c in cols)
    for _, r in df.head(max_rows).iterrows():
        flag = flag_column is not None and bool(r[flag_column])
        cells = []
        for c in cols:
            v = r[c]
            if isinstance(v, (float, np.floating)):
                text = "" if not np.isfinite(v) else f"{v:.1f}" if abs(v) >= 10 else f"{v:.2f}"
                cells.append(f"<td>{text}</td>")
            else:
                cells.append(f'<td class="t">{html.escape(str(v))}</td>')
        rows.append(f'<tr class="{"flag" if flag else ""}">{"".join(cells)}</tr>')
    more = (f'<p class="muted">{len(df) - max_rows} more rows in the CSV file.</p>'
            if len(df) > max_rows else "")
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>{more}"
