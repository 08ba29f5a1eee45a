"""CSV tables: checked reading (columns, numbers, channels) and byte-stable writing.

Every reader built on this names the file and the row of the first problem (rows count as in a
spreadsheet: the header is row 1).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.model.errors import FlyoverInputError


def read_csv_table(path, what: str, columns=()) -> pd.DataFrame:
    """Read a CSV file as text columns; missing or empty files, or missing ``columns``, give a
    clear error."""
    path = Path(path)
    if not path.is_file():
        raise FlyoverInputError(f"{what} file not found", str(path), f"an existing {what} CSV",
                                hint="relative paths in a campaign file start at its folder")
    try:
        df = pd.read_csv(path, dtype=str, skipinitialspace=True, comment="#")
    except pd.errors.EmptyDataError:
        raise FlyoverInputError(f"{what} file is empty", str(path), "a header row and data rows")\
            from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise FlyoverInputError(f"{what} file is not a readable CSV", str(path),
                                "comma-separated text", str(exc).split("\n")[0]) from None
    df.columns = [c.strip() for c in df.columns]
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise FlyoverInputError(f"{what} file lacks columns {missing}", str(path),
                                ",".join(columns), ",".join(df.columns),
                                "it was written by another flyover version: re-run the workflow")
    if len(df) == 0:
        raise FlyoverInputError(f"{what} file has no data rows", str(path),
                                "at least one row under the header")
    return df


def pick_columns(df: pd.DataFrame, options: list[list[str]], path, what: str) -> list[str]:
    cols = list(df.columns)
    for opt in options:
        if all(c in cols for c in opt):
            return opt
    expected = " or ".join(",".join(o) for o in options)
    hint = ""
    if len(cols) == 1 and (";" in cols[0] or "\t" in cols[0]):
        hint = ("the file uses ';' or tabs between values: save it as comma-separated, with a "
                "point as the decimal mark")
    raise FlyoverInputError(f"{what} file has the wrong columns", str(path), expected,
                            ",".join(cols), hint)


def numeric_column(df: pd.DataFrame, col: str, path, integer: bool = False) -> np.ndarray:
    """A column as numbers; the first non-numeric or missing cell is reported with its row."""
    values = pd.to_numeric(df[col], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        i = bad[0]
        raise FlyoverInputError(f"value in column '{col}' is not a number", f"{path}, row {i + 2}",
                                "a finite number", repr(df[col].iloc[i]))
    if integer:
        frac = np.flatnonzero(values != np.round(values))
        if frac.size:
            i = frac[0]
            raise FlyoverInputError(f"value in column '{col}' is not a whole number",
                                    f"{path}, row {i + 2}", "an integer", repr(df[col].iloc[i]))
    return values


def channel_column(df, path) -> np.ndarray:
    ch = numeric_column(df, "channel", path, integer=True).astype(int)
    if np.any(ch < 1):
        i = int(np.flatnonzero(ch < 1)[0])
        raise FlyoverInputError("channel numbers start at 1", f"{path}, row {i + 2}",
                                "a 1-based channel of the recording", f"{ch[i]}")
    uniq, counts = np.unique(ch, return_counts=True)
    if np.any(counts > 1):
        dup = int(uniq[counts > 1][0])
        rows = [int(r) + 2 for r in np.flatnonzero(ch == dup)]
        raise FlyoverInputError(f"channel {dup} appears more than once", f"{path}, rows {rows}",
                                "each channel once")
    return ch


def write_csv(path, frame: pd.DataFrame, float_format: str = "%.6f") -> None:
    """Write a table atomically, with a fixed float format (identical inputs, identical bytes)."""
    from flyover.io.atomic import atomic_path
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False, float_format=float_format, lineterminator="\n")
