"""``maps.npz``: the band maps of every analysed window of a pass (compressed numpy archive).

Arrays: ``x_m`` (n_x,), ``y_m`` (n_y,) body-axis grid; ``band_hz`` nominal and
``band_center_hz`` exact midbands (n_bands,); ``window`` (n_windows,) indices; ``time_utc_ns``
int64 window-centre emission times; ``polar_angle_deg``; ``diagonal_removed`` and ``full``
float32 (n_windows, n_bands, n_x, n_y) in Pa^2, band power of the source strength at 1 m.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from flyover.io.atomic import atomic_path

NAME = "maps.npz"
# The per-window map figures: a folder of the pass, one figure per window (and per method
# compared with the headline one).
FIGURE_FOLDER = "maps"


# Map figures are drawn for the analysed windows nearest these polar angles (the ones the pass
# page shows, about a second each to draw); every window's maps are in the archive and the
# viewer.
FIGURE_POLAR_DEG = (60.0, 90.0, 120.0)


def figure_windows(window, polar_angle_deg) -> list[int]:
    """The analysed windows whose map figures are drawn: the first nearest to each of
    :data:`FIGURE_POLAR_DEG`, each once, in that order.

    Parameters
    ----------
    window : array_like of int, shape (n,)
    polar_angle_deg : array_like of float, shape (n,)
    """
    w = np.asarray(window, int)
    polar = np.asarray(polar_angle_deg, float)
    if not len(w):
        return []
    return list(dict.fromkeys(int(w[np.argmin(np.abs(polar - t))]) for t in FIGURE_POLAR_DEG))


def window_figure_name(window: int, method: str | None = None) -> str:
    """The map figure of a window (of another method than the headline one)."""
    return f"window-{window:03d}.png" if method is None else f"window-{window:03d}-{method}.png"


def method_figures(folder) -> list[tuple[int, str, Path]]:
    """The map figures of other methods than the headline one in a pass's folder: (window,
    method, path) each, in name order."""
    found = []
    for path in sorted((Path(folder) / FIGURE_FOLDER).glob("window-*-*.png")):
        window, method = path.stem.split("-", 2)[1:]
        found.append((int(window), method, path))
    return found

UNITS = ("Pa^2: band power of the source strength at 1 m; axes (window, band, x_m, y_m); body "
         "axes x forward, y starboard")


def write_maps(folder, *, x_m, y_m, band_hz, band_center_hz, window, time_utc_ns,
               polar_angle_deg, diagonal_removed, full) -> Path:
    """Write the maps archive (arrays as in the module docstring)."""
    path = Path(folder) / NAME
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(
                fh, x_m=x_m, y_m=y_m, band_hz=band_hz, band_center_hz=band_center_hz,
                window=np.asarray(window, dtype=int),
                time_utc_ns=np.asarray(time_utc_ns, dtype=np.int64),
                polar_angle_deg=np.asarray(polar_angle_deg, dtype=float),
                diagonal_removed=np.asarray(diagonal_removed, dtype=np.float32),
                full=np.asarray(full, dtype=np.float32), units=np.array(UNITS))
    return path


def read_maps(folder) -> dict[str, np.ndarray]:
    """The arrays of a pass's maps archive, loaded."""
    with np.load(Path(folder) / NAME) as data:
        return {k: data[k] for k in data.files}
