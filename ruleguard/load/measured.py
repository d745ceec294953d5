"""Measured frequency responses from CSV (``measured_response`` plants).

The file has a header row and one row per frequency::

    freq_hz,magnitude_db,phase_deg
    1.0,39.58,-89.95

Blank lines and lines starting with ``#`` are skipped. The magnitude column
is ``magnitude_db`` (dB) or ``magnitude_abs`` (linear, converted to dB);
``magnitude_unit = "abs"`` in the registry entry also marks the column as
linear. Frequencies must be positive and strictly increasing, at most
:data:`MAX_ROWS` rows, every value finite. The phase may be wrapped: it is
unwrapped here (each step between rows is brought into [-180, 180) degrees by
whole turns), so the record holds the unwrapped phase.

Every problem is an :class:`~ruleguard.errors.InputError` at the file, line
(row) and column of the cell, with the column name as the key.
"""

from __future__ import annotations

import math
from pathlib import Path

from ruleguard.errors import InputError
from ruleguard.load.sources import read_text
from ruleguard.load.spec import MeasuredData
from ruleguard.location import Location

#: Most data rows a measured response may have.
MAX_ROWS = 10000
#: Fewest data rows (interpolation needs two points).
MIN_ROWS = 2

_MAGNITUDE_COLUMNS = ("magnitude_db", "magnitude_abs")


def read_measured(
    root: str | Path,
    rel_path: str,
    origin: Location | None,
    magnitude_unit: str,
    texts: dict[str, str],
) -> MeasuredData:
    """Read and check a measured-response CSV file (contained under ``root``)."""
    if not rel_path.lower().endswith(".csv"):
        raise InputError.at(
            origin or Location(rel_path), f"'{rel_path}': a measured response must be a .csv file"
        )
    name, text = read_text(root, rel_path, origin)
    texts[name] = text
    return parse_measured(name, text, magnitude_unit)


def _cells(line: str) -> list[tuple[str, int]]:
    """Cells of a CSV line with the 1-based column where each starts."""
    cells = []
    start = 0
    for part in line.split(","):
        stripped = part.strip()
        offset = len(part) - len(part.lstrip())
        cells.append((stripped, start + offset + 1))
        start += len(part) + 1
    return cells


def parse_measured(name: str, text: str, magnitude_unit: str = "db") -> MeasuredData:
    """Parse CSV ``text`` of file ``name`` into :class:`MeasuredData`."""
    rows: list[tuple[int, list[tuple[str, int]]]] = []
    header: list[tuple[str, int]] | None = None
    header_line = 0
    for number, raw_line in enumerate(text.splitlines(), start=1):
        line = raw_line.rstrip("\r")
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        if header is None:
            header, header_line = _cells(line), number
            continue
        rows.append((number, _cells(line)))
        if len(rows) > MAX_ROWS:
            raise InputError(
                name, number, 1, "", f"more than {MAX_ROWS} data rows; the limit is {MAX_ROWS}"
            )
    if header is None:
        raise InputError(name, 1, 1, "", "no header row; expected freq_hz,magnitude_db,phase_deg")
    names = [cell.lower() for cell, _ in header]
    if (
        len(names) != 3
        or names[0] != "freq_hz"
        or names[1] not in _MAGNITUDE_COLUMNS
        or names[2] != "phase_deg"
    ):
        raise InputError(
            name,
            header_line,
            1,
            "",
            f"header is '{','.join(c for c, _ in header)}'; expected "
            "freq_hz,magnitude_db,phase_deg (or magnitude_abs for a linear magnitude)",
        )
    linear = names[1] == "magnitude_abs" or magnitude_unit == "abs"
    if len(rows) < MIN_ROWS:
        raise InputError(
            name,
            header_line,
            1,
            "",
            f"{len(rows)} data row(s); a measured response needs at least {MIN_ROWS}",
        )
    freq: list[float] = []
    magnitude: list[float] = []
    phase: list[float] = []
    column_names = [c for c, _ in header]
    for line_number, cells in rows:
        if len(cells) != 3:
            raise InputError(
                name,
                line_number,
                1,
                "",
                f"row has {len(cells)} cell(s); expected 3 ({','.join(column_names)})",
            )
        values = []
        for (cell, column), column_name in zip(cells, column_names, strict=True):
            try:
                value = float(cell)
            except ValueError:
                raise InputError(
                    name, line_number, column, column_name, f"'{cell}' is not a number"
                ) from None
            if not math.isfinite(value):
                raise InputError(
                    name, line_number, column, column_name, f"'{cell}' is not a finite number"
                )
            values.append(value)
        f, m, p = values
        if f <= 0:
            raise InputError(
                name, line_number, cells[0][1], column_names[0],
                f"frequency must be > 0 Hz, found {f:g}",
            )
        if freq and f <= freq[-1]:
            raise InputError(
                name, line_number, cells[0][1], column_names[0],
                f"frequencies must increase strictly: {f:g} Hz follows {freq[-1]:g} Hz",
            )
        if linear:
            if m <= 0:
                raise InputError(
                    name, line_number, cells[1][1], column_names[1],
                    f"a linear magnitude must be > 0, found {m:g}",
                )
            m = 20.0 * math.log10(m)
        freq.append(f)
        magnitude.append(m)
        phase.append(p)
    return MeasuredData(tuple(freq), tuple(magnitude), tuple(unwrap_deg(phase)), name)


def unwrap_deg(phase_deg: list[float]) -> list[float]:
    """Unwrap a phase sequence in degrees: each step is brought into [-180, 180)."""
    if not phase_deg:
        return []
    out = [phase_deg[0]]
    for value in phase_deg[1:]:
        step = value - phase_deg[len(out) - 1]
        step -= 360.0 * math.floor((step + 180.0) / 360.0)
        out.append(out[-1] + step)
    return out
