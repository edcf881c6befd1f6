"""Read a study source's track record from a CSV file, and make cells safe for export.

Format
------
- UTF-8 text (a byte-order mark is allowed), comma-separated, quoting as in
  RFC 4180.
- A header is required, with at least the columns ``date``, ``signal`` and
  ``state``; header names are matched case-insensitively with surrounding
  spaces stripped; other columns are allowed and ignored (they still count
  when looking for duplicate rows).
- ``date`` is ``YYYY-MM-DD``; values have surrounding spaces stripped;
  blank lines are skipped.

All or nothing: every bad line is reported (with its line number in the file,
counting the header as line 1) in one :class:`~valuation.errors.ModelValidationError`,
and no record is returned when any line is bad.

Limits (so that a mistaken upload is refused fast, before it is parsed):
``MAX_BYTES`` (16 MiB; 200,000 typical records take about 10 MB) and
``MAX_ROWS`` (200,000 records). The first ``MAX_PROBLEMS_REPORTED`` problems are
listed, then how many more there were.

References
----------
.. [1] RFC 4180, "Common Format and MIME Type for Comma-Separated Values (CSV)
   Files", 2005.
.. [2] OWASP, "CSV Injection", https://owasp.org/www-community/attacks/CSV_Injection
   (from memory).
"""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Sequence
from typing import Any

from valuation.errors import ModelValidationError, Problem
from valuation.limits import MAX_PROBLEMS_REPORTED
from valuation.reliability import Record, parse_date

__all__ = [
    "MAX_BYTES",
    "MAX_ROWS",
    "REQUIRED_COLUMNS",
    "neutralise_csv_cell",
    "parse_records_csv",
    "read_records_csv",
]

MAX_BYTES = 16 * 1024 * 1024
MAX_ROWS = 200_000
REQUIRED_COLUMNS = ("date", "signal", "state")

# Characters that make a spreadsheet read a cell as a formula or a control (OWASP).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise_csv_cell(value: Any) -> str:
    """Text for one exported CSV cell that a spreadsheet will not run as a formula.

    A text cell starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
    return gets a leading single quote, as OWASP advises against CSV
    injection. Python numbers (not bools) are written as they are: their text
    (``-0.5``, ``1e-05``) is a number to a spreadsheet, never a formula.
    ``None`` becomes an empty cell.

    Examples
    --------
    >>> neutralise_csv_cell("=HYPERLINK(\\"http://x\\")")
    '\\'=HYPERLINK("http://x")'
    >>> neutralise_csv_cell("-5 days")
    "'-5 days"
    >>> neutralise_csv_cell(-0.5)
    '-0.5'
    >>> neutralise_csv_cell("favourable")
    'favourable'

    References
    ----------
    OWASP, "CSV Injection" (from memory).
    """
    if value is None:
        return ""
    if isinstance(value, int | float) and not isinstance(value, bool):
        return repr(value) if isinstance(value, float) else str(value)
    text = str(value)
    if text.startswith(_FORMULA_START):
        return "'" + text
    return text


class _Problems:
    """Collects problems up to the reporting cap and counts the rest."""

    def __init__(self) -> None:
        self.items: list[Problem] = []
        self.more = 0

    def add(self, location: str, message: str) -> None:
        if len(self.items) < MAX_PROBLEMS_REPORTED:
            self.items.append(Problem(location, message))
        else:
            self.more += 1

    def raise_if_any(self) -> None:
        if not self.items:
            return
        items = list(self.items)
        if self.more:
            items.append(Problem("file", f"{self.more} more problems not listed"))
        raise ModelValidationError(items)


def _known_list(names: Sequence[str] | None) -> list[str] | None:
    return None if names is None else [str(n) for n in names]


def _check_value(
    kind: str, value: str, known: list[str] | None, where: str, problems: _Problems
) -> bool:
    if not value:
        problems.add(where, f"{kind}: is empty")
        return False
    if known is not None and value not in known:
        hint = ""
        if value.casefold() in {k.casefold() for k in known}:
            hint = "; names are case-sensitive"
        problems.add(where, f"{kind}: unknown {kind} {value!r} (known: {', '.join(known)}{hint})")
        return False
    return True


def parse_records_csv(
    text: str,
    *,
    known_states: Sequence[str] | None = None,
    known_signals: Sequence[str] | None = None,
    max_rows: int = MAX_ROWS,
) -> list[Record]:
    """Parse the text of a records CSV (see the module's notes for the format).

    Parameters
    ----------
    text : str
        The whole file as text.
    known_states, known_signals : sequence of str, optional
        When given, any other state or signal name is a problem (names are
        case-sensitive).
    max_rows : int, default ``MAX_ROWS``
        More records than this is refused.

    Returns
    -------
    list of Record
        In file order.

    Raises
    ------
    ModelValidationError
        Every problem, located ``"line N"``, ``"header"`` or ``"file"``, e.g.
        ``line 7: state: unknown state 'tepid' (known: hot, warm, cold)``.
    """
    problems = _Problems()
    states = _known_list(known_states)
    signals = _known_list(known_signals)
    if text.startswith("\ufeff"):
        text = text[1:]
    if not text.strip():
        raise ModelValidationError(
            [Problem("file", "is empty: expected a header line with the columns date, signal, state")]
        )
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    header: list[str] | None = None
    columns: dict[str, int] = {}
    width = 0
    seen: dict[tuple[str, ...], int] = {}
    records: list[Record] = []
    last_line = 0
    n_rows = 0
    while True:
        start = last_line + 1
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            problems.add(f"line {reader.line_num}", f"unreadable CSV ({exc}); reading stopped here")
            break
        last_line = reader.line_num
        cells = [c.strip() for c in row]
        if not any(cells):
            continue  # a blank line
        if header is None:
            header = [c.lower() for c in cells]
            for i, name in enumerate(header):
                if name and name in columns:
                    problems.add("header", f"column {name!r} appears more than once")
                columns.setdefault(name, i)
            missing = [c for c in REQUIRED_COLUMNS if c not in columns]
            if missing:
                problems.add(
                    "header",
                    f"missing column{'s' if len(missing) > 1 else ''} "
                    + ", ".join(missing)
                    + f" (found: {', '.join(h for h in header if h) or 'none'};"
                    " required: date, signal, state)",
                )
            if problems.items:
                break
            width = len(header)
            continue
        n_rows += 1
        if n_rows > max_rows:
            problems.add("file", f"more than {max_rows:,} records; split the file and import it in parts")
            break
        where = f"line {start}"
        if len(cells) != width:
            problems.add(where, f"expected {width} cells as in the header, got {len(cells)}")
            continue
        good = True
        try:
            day = parse_date(cells[columns["date"]], "date")
        except ModelValidationError as exc:
            for p in exc.problems:
                problems.add(where, f"date: {p.message}")
            good = False
        signal = cells[columns["signal"]]
        state = cells[columns["state"]]
        good &= _check_value("signal", signal, signals, where, problems)
        good &= _check_value("state", state, states, where, problems)
        key = tuple(cells)
        if key in seen:
            problems.add(
                where,
                f"duplicate of line {seen[key]} (same date, signal, state and other columns)",
            )
            good = False
        else:
            seen[key] = start
        if good:
            records.append(Record(day, signal, state))
    if header is None and not problems.items:
        problems.add("file", "is empty: expected a header line with the columns date, signal, state")
    elif header is not None and n_rows == 0 and not problems.items:
        problems.add("file", "has a header but no records")
    problems.raise_if_any()
    return records


def read_records_csv(
    source: str | os.PathLike[str] | Any,
    *,
    known_states: Sequence[str] | None = None,
    known_signals: Sequence[str] | None = None,
    max_bytes: int = MAX_BYTES,
    max_rows: int = MAX_ROWS,
) -> list[Record]:
    """Read a records CSV from a path or a binary file object, refusing oversize files fast.

    At most ``max_bytes + 1`` bytes are ever read, so a 50 MB file is refused
    without being parsed. See :func:`parse_records_csv` for the rest.

    Raises
    ------
    ModelValidationError
        ``file: larger than 16,777,216 bytes ...``, ``file: not UTF-8 text ...``
        and every problem of :func:`parse_records_csv`.
    OSError
        The file cannot be opened or read.
    """
    if isinstance(source, str | os.PathLike):
        size = os.stat(source).st_size
        if size > max_bytes:
            raise ModelValidationError([_too_big(max_bytes, size)])
        with open(source, "rb") as fh:
            data = fh.read(max_bytes + 1)
    else:
        data = source.read(max_bytes + 1)
        if isinstance(data, str):
            data = data.encode("utf-8")
    if len(data) > max_bytes:
        raise ModelValidationError([_too_big(max_bytes, None)])
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise ModelValidationError(
            [Problem(f"line {line}", f"not UTF-8 text (byte {exc.start}); save the file as UTF-8")]
        ) from None
    return parse_records_csv(
        text, known_states=known_states, known_signals=known_signals, max_rows=max_rows
    )


def _too_big(max_bytes: int, size: int | None) -> Problem:
    found = f" ({size:,} bytes)" if size is not None else ""
    return Problem(
        "file",
        f"larger than {max_bytes:,} bytes{found}; at most {MAX_ROWS:,} records per file, "
        "split the file and import it in parts",
    )
