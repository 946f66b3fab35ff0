"""CSV files that are safe to open in a spreadsheet.

A spreadsheet runs a cell that starts with ``=``, ``+``, ``-`` or ``@`` as a formula, and query
text is written by strangers: "=HYPERLINK(...)" in a search box must stay text. Following the
OWASP guidance on CSV injection (OWASP ASVS 1.2.10; CWE-1236, "Improper Neutralization of
Formula Elements in a CSV File"), every text cell that starts with ``=``, ``+``, ``-``, ``@``, a
tab, a carriage return or NUL gets a single quote (``'``) in front, and fields are quoted as RFC
4180 describes.

File format written by :func:`write_csv`: UTF-8 without a byte-order mark, comma separator,
double quotes around a field only when it holds a comma, a double quote or a line break
(``csv.QUOTE_MINIMAL``; an inner double quote is doubled), CRLF line ends as RFC 4180 specifies,
a header row, no index column. Numeric columns are written as numbers and never prefixed, so a
negative number stays a number.

:func:`write_query_csv` writes the same format from a named query whose rows DuckDB has already
formatted as CSV lines (the macros of ``sql/csv.sql``), for exports too large for a pandas round
trip.
"""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
import pyarrow as pa

from querygap.workspace import arrow, run

__all__ = [
    "FORMULA_TRIGGERS",
    "neutralize_cell",
    "neutralize_frame",
    "write_csv",
    "write_query_csv",
]

#: First characters that make a spreadsheet treat a cell as a formula (OWASP; CWE-1236).
FORMULA_TRIGGERS: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r", "\0")


def neutralize_cell(value: str) -> str:
    """Prefix ``'`` to a text that a spreadsheet would run as a formula.

    >>> neutralize_cell("=1+1"), neutralize_cell("sofa")
    ("'=1+1", 'sofa')
    """
    return "'" + value if value.startswith(FORMULA_TRIGGERS) else value


def _neutralize_column(column: pd.Series) -> pd.Series:
    if isinstance(column.dtype, pd.CategoricalDtype):
        column = column.astype(object)
    is_text = pd.api.types.is_object_dtype(column.dtype) or pd.api.types.is_string_dtype(
        column.dtype
    )
    if not is_text or pd.api.types.infer_dtype(column, skipna=True) not in (
        "string",
        "mixed",
        "mixed-integer",
    ):
        return column  # numbers, dates, booleans: nothing a spreadsheet would run
    starts = column.str.startswith(FORMULA_TRIGGERS, na=False).astype(bool)
    if not starts.any():
        return column
    column = column.copy()
    column[starts] = "'" + column[starts]
    return column


def neutralize_frame(df: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of ``df`` with :func:`neutralize_cell` applied to every text cell.

    Text columns (object, string or categorical dtype) are handled with vectorised string
    methods; non-text values inside them (None, NaN, numbers) are left as they are. Column labels
    are neutralised too, because the header row is also a row of cells.
    """
    out = df.copy()
    for position in range(out.shape[1]):
        out.isetitem(position, _neutralize_column(out.iloc[:, position]))
    out.columns = [
        neutralize_cell(label) if isinstance(label, str) else label for label in out.columns
    ]
    return out


def write_csv(df: pd.DataFrame, path: Path) -> Path:
    """Write ``df`` as a spreadsheet-safe CSV file (format in the module docstring).

    The file is written next to ``path`` under a temporary name and then renamed, so a reader
    never sees half a file.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    path = Path(path)
    partial = path.with_name(path.name + ".partial")
    neutralize_frame(df).to_csv(
        partial,
        index=False,
        encoding="utf-8",
        quoting=csv.QUOTE_MINIMAL,
        lineterminator="\r\n",
    )
    os.replace(partial, path)
    return path


def csv_header(columns: Sequence[str]) -> str:
    """The header row of :func:`write_csv` for ``columns`` (neutralised, quoted as needed)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, quoting=csv.QUOTE_MINIMAL, lineterminator="\r\n")
    writer.writerow([neutralize_cell(c) for c in columns])
    return buffer.getvalue()


def write_query_csv(
    conn: duckdb.DuckDBPyConnection,
    name: str,
    params: Mapping[str, Any],
    columns: Sequence[str],
    path: Path,
) -> Path:
    """Write the CSV lines of named query ``name`` under a header of ``columns``.

    The query returns one column ``line``: each row's cells made with the ``csv_macros`` of
    ``sql/csv.sql`` (given ``$triggers``, :data:`FORMULA_TRIGGERS`) and ending in CR LF, so the
    file has the format of :func:`write_csv`. Lines go from DuckDB's Arrow buffers to the file
    without a Python object per row; the file is written under a temporary name and renamed.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    run(conn, "csv_macros")
    lines = arrow(conn, name, {**params, "triggers": list(FORMULA_TRIGGERS)})["line"]
    path = Path(path)
    partial = path.with_name(path.name + ".partial")
    with open(partial, "wb") as out:
        out.write(csv_header(columns).encode("utf-8"))
        for chunk in lines.chunks:
            _write_strings(out, chunk)
    os.replace(partial, path)
    return path


def _write_strings(out: io.BufferedWriter, chunk: pa.Array) -> None:
    """Write the UTF-8 bytes of an Arrow string array, values back to back."""
    if chunk.null_count:
        raise ValueError("a CSV line is NULL; every cell macro must give text")
    chunk = chunk.cast(pa.large_string())
    if len(chunk) == 0:
        return
    _, offsets, data = chunk.buffers()
    ends = memoryview(offsets).cast("q")
    first, last = ends[chunk.offset], ends[chunk.offset + len(chunk)]
    if last > first:
        out.write(memoryview(data)[first:last])
