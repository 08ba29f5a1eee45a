"""Result files, one module each: its name, columns (or keys) with units, writer and reader.

Every table is a :class:`TableFile`; the modules of this package define one each, so the stage
that writes a file and the stages that read it back share one description of it.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from flyover.io.atomic import write_text
from flyover.io.csvtable import write_csv
from flyover.model.errors import FlyoverInputError


@dataclass(frozen=True)
class TableFile:
    """A CSV result file.

    Attributes
    ----------
    name : str
        File name inside its folder (the pass's or the campaign's result folder).
    columns : tuple of (str, str)
        Column name and its unit or meaning, in file order.
    float_format : str
        printf format of floats: fixed, so identical results give identical bytes.
    more_columns : str
        When not empty, further columns may follow the fixed ones; says what they are.
    flags : tuple of str
        Columns of true/false values: read back as booleans (CSV holds them as text).
    """

    name: str
    columns: tuple[tuple[str, str], ...]
    float_format: str = "%.6f"
    more_columns: str = ""
    flags: tuple[str, ...] = ()

    @property
    def column_names(self) -> list[str]:
        return [c for c, _ in self.columns]

    def path(self, folder) -> Path:
        return Path(folder) / self.name

    def write(self, folder, frame: pd.DataFrame) -> Path:
        """Write ``frame`` (its columns in this file's order; extra ones only if allowed)."""
        names = self.column_names
        extra = [c for c in frame.columns if c not in names]
        if extra and not self.more_columns:
            raise RuntimeError(f"{self.name}: columns {extra} are not part of the file")
        out = pd.DataFrame(frame, columns=names + extra) if len(frame.columns) else \
            pd.DataFrame(columns=names)
        write_csv(self.path(folder), out, float_format=self.float_format)
        return self.path(folder)

    def read(self, folder) -> pd.DataFrame:
        """Read the file back; a missing file or column says which and what to do."""
        path = self.path(folder)
        if not path.is_file():
            raise FlyoverInputError(f"result file {self.name} is missing", str(path),
                                    hint="run the workflow step that writes it (flyover run)")
        try:
            frame = pd.read_csv(path)
        except pd.errors.EmptyDataError:
            frame = pd.DataFrame(columns=self.column_names)
        missing = [c for c in self.column_names if c not in frame.columns]
        if missing:
            raise FlyoverInputError(f"result file {self.name} lacks columns {missing}", str(path),
                                    ",".join(self.column_names), ",".join(frame.columns),
                                    "it was written by another flyover version: re-run the "
                                    "workflow")
        for name in self.flags:
            frame[name] = frame[name].astype(str).str.strip().str.lower().isin(("true", "1"))
        return frame

    def describe(self) -> str:
        """Markdown lines: the file and its columns with units (for the docs)."""
        rows = [f"- `{c}`: {u}" for c, u in self.columns]
        if self.more_columns:
            rows.append(f"- then: {self.more_columns}")
        return f"`{self.name}`\n" + "\n".join(rows)


@dataclass(frozen=True)
class FigureFile:
    """A figure a step writes.

    Attributes
    ----------
    name : str
        File name inside its folder.
    caption : str
        What it shows (the report's caption and alternative text).
    """

    name: str
    caption: str

    def path(self, folder) -> Path:
        return Path(folder) / self.name


def file_name(result) -> str:
    """The file name of a result: a :class:`TableFile`'s or :class:`FigureFile`'s, or a name."""
    return result if isinstance(result, str) else result.name


def write_json(folder, name: str, data: dict) -> Path:
    """Write a JSON result file (sorted keys, indented: stable bytes for identical results)."""
    path = Path(folder) / name
    write_text(path, json.dumps(data, indent=2, sort_keys=True) + "\n")
    return path


def read_json(folder, name: str, step: str) -> dict:
    """Read a JSON result file back; a missing one names the workflow step that writes it."""
    path = Path(folder) / name
    if not path.is_file():
        raise FlyoverInputError(f"result file {name} is missing", str(path),
                                hint=f"run the {step} step (flyover run)")
    return json.loads(path.read_text(encoding="utf-8"))


# Sizes of a pass's result files, measured on the demo (16 windows, 13 bands, 775 grid points):
# maps.npz 1.18 MB (float32, two maps per band, compression gains little), a map figure per
# window 144 kB, the other files together 1.0 MB. A campaign's tables and report add about
# 1 MB per pass (the report embeds every figure).
_MAP_FIGURE_BYTES = 200_000
_PASS_FIXED_BYTES = 1_500_000
_CAMPAIGN_BYTES_PER_PASS = 1_000_000


def pass_output_bytes(n_windows: int, n_bands: int, n_grid: int) -> int:
    """About how many bytes a pass's results take (a generous estimate, for space checks)."""
    return (n_windows * (n_bands * n_grid * 4 * 2 + _MAP_FIGURE_BYTES) + _PASS_FIXED_BYTES
            + _CAMPAIGN_BYTES_PER_PASS)
