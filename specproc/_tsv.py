"""The one writer of tab-separated tables (results, cohort, phantom and demo tables).

Every TSV file specproc writes goes through :func:`tsv_text` or :class:`TsvWriter`, which
use the :mod:`csv` module (tab delimiter, ``"\\n"`` line ends, minimal quoting: a cell
holding a quote character is quoted and the quote doubled) with one cell formatter,
:func:`format_cell`:

* ``None`` and non-finite numbers: ``n/a`` (the BIDS spelling of a missing value, which the
  manifest reader also reads as empty);
* booleans: ``true`` / ``false``;
* integers as they are; other numbers with 6 significant digits (``%.6g``);
* text with its tabs, line breaks and runs of white space collapsed to one space (a cell is
  one line), empty text as ``n/a``.

Read a table back with ``csv.DictReader(handle, delimiter="\\t")`` or
``pandas.read_csv(path, sep="\\t", na_values="n/a")``.
"""

from __future__ import annotations

import csv
import io
import math
import numbers
import os
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, TextIO

from specproc._atomic import write_text

__all__ = ["MISSING", "TsvWriter", "format_cell", "tsv_text", "write_tsv"]

#: Text of a missing value.
MISSING = "n/a"


def format_cell(value: Any) -> str:
    """Text of one cell (see the module docstring)."""
    if value is None:
        return MISSING
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        return f"{number:.6g}" if math.isfinite(number) else MISSING
    text = " ".join(str(value).split())
    return text if text else MISSING


def _cells(row: Mapping[str, Any] | Sequence[Any], columns: Sequence[str]) -> list[str]:
    if isinstance(row, Mapping):
        return [format_cell(row.get(c)) for c in columns]
    values = list(row)
    if len(values) != len(columns):
        raise ValueError(f"a row has {len(values)} cells for {len(columns)} columns")
    return [format_cell(v) for v in values]


class TsvWriter:
    """Write a table row by row to an open text file (opened with ``newline=""``).

    Parameters
    ----------
    handle : text file
        Destination.
    columns : sequence of str
        Column names; the header line is written at once.
    """

    def __init__(self, handle: TextIO, columns: Sequence[str]) -> None:
        self.columns = tuple(columns)
        self._writer = csv.writer(handle, delimiter="\t", lineterminator="\n",
                                  quoting=csv.QUOTE_MINIMAL)
        self._writer.writerow([" ".join(str(c).split()) for c in self.columns])

    def write(self, row: Mapping[str, Any] | Sequence[Any]) -> None:
        """Write one row: a mapping by column name (missing keys: ``n/a``) or a sequence."""
        self._writer.writerow(_cells(row, self.columns))


def tsv_text(columns: Sequence[str],
             rows: Iterable[Mapping[str, Any] | Sequence[Any]]) -> str:
    """The text of a table: a header line, then one line per row."""
    buffer = io.StringIO(newline="")
    writer = TsvWriter(buffer, columns)
    for row in rows:
        writer.write(row)
    return buffer.getvalue()


def write_tsv(path: str | os.PathLike[str], columns: Sequence[str],
              rows: Iterable[Mapping[str, Any] | Sequence[Any]]) -> None:
    """Write a table to ``path`` atomically (:func:`specproc._atomic.write_text`)."""
    write_text(path, tsv_text(columns, rows))
