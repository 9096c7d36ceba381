"""CSV data files (profiles, ice mass balance, shortwave): typed columns, located errors.

Line numbers count as a text editor does: the header is line 1, the first data row 2.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from floeheat.errors import ArchiveError
from floeheat.io.archive import parse_iso_time

__all__ = ["read_data_csv", "numeric_column", "time_column"]


def read_data_csv(path, required) -> pd.DataFrame:
    """The CSV as strings ('' when empty), checking the required columns."""
    path = Path(path)
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8",
                            skipinitialspace=True)
    except FileNotFoundError as exc:
        raise ArchiveError.at(str(path), "", "the file does not exist",
                              "check the path in deployments.csv") from exc
    except (UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise ArchiveError.at(str(path), "", f"cannot be read as UTF-8 CSV ({exc})",
                              "save it as UTF-8 CSV with a header row") from exc
    table.columns = [str(c).strip() for c in table.columns]
    missing = [c for c in required if c not in table.columns]
    if missing:
        raise ArchiveError.at(str(path), "header (line 1)",
                              f"required column(s) {', '.join(missing)} missing",
                              f"add the column(s) {', '.join(missing)}")
    if table.empty:
        raise ArchiveError.at(str(path), "", "the file has no data rows",
                              "add the data or remove the file from the archive")
    return table


def numeric_column(table: pd.DataFrame, column: str, *, file) -> np.ndarray:
    """A column as float64, NaN where empty; ArchiveError naming the first bad line."""
    text = table[column].str.strip()
    values = pd.to_numeric(text.replace("", "nan"), errors="coerce").to_numpy("float64")
    bad = np.isnan(values) & ~text.str.lower().isin(["", "nan", "na"]).to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ArchiveError.at(str(file), f"line {i + 2}, column {column}",
                              f"{table[column].iloc[i]!r} is not a number",
                              "write a decimal number, or leave the cell empty for no data")
    return values


def time_column(table: pd.DataFrame, column: str, *, file) -> np.ndarray:
    """ISO 8601 times as naive UTC datetime64[ns]; ArchiveError naming the bad line."""
    text = table[column].str.strip()
    try:
        parsed = pd.to_datetime(text, format="ISO8601", utc=True)
        out = parsed.dt.tz_localize(None).to_numpy("datetime64[ns]")
    except (ValueError, TypeError):
        out = None
    if out is None or np.isnat(out).any():
        values = []
        for i, value in enumerate(text):
            try:
                values.append(parse_iso_time(value))
                if np.isnat(values[-1]):
                    raise ValueError(value)
            except ValueError:
                raise ArchiveError.at(
                    str(file), f"line {i + 2}, column {column}",
                    f"{value!r} is not an ISO 8601 time",
                    "write it like 2020-05-01T00:00:00Z") from None
        out = np.array(values, dtype="datetime64[ns]")
    return out
