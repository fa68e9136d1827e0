"""Measured I-V files: read and validate one CSV sweep.

Format (studies/README.md, "Measured I-V file")::

    # comment lines start with '#'; two may carry settings:
    # area_um2 = 100          (mesa area; needed with current_a)
    # temperature_k = 77      (default: the stack's temperature)
    bias_v,current_a
    0.00,0.0
    0.02,1.3e-4
    ...

The first line that is not a comment is the header. Columns: ``bias_v`` and
exactly one of ``current_density_a_cm2`` and ``current_a`` (then the
``# area_um2`` line is required); an optional ``temperature_k`` column must
hold one value (one sweep is one temperature). Other columns are ignored.
One file is one sweep away from zero bias in one polarity: biases ``>= 0``
and strictly increasing, or ``<= 0`` and strictly decreasing (a negative
sweep); at least :data:`MIN_POINTS` rows, every cell a finite number.
A bad file raises :class:`wellwright.physics.errors.InputError` naming the
file, the line (from 1) and the column.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from wellwright.physics.errors import InputError

__all__ = ["Measurement", "read_measured", "MIN_POINTS"]

MIN_POINTS = 10
CURRENT_COLUMNS = ("current_density_a_cm2", "current_a")
SETTINGS = {"area_um2": (1e-2, 1e8), "temperature_k": (1.0, 1000.0)}


@dataclass(frozen=True)
class Measurement:
    """One measured sweep, stored with the biases increasing.

    ``current_density_a_cm2`` carries the sign of the bias; ``area_um2`` is
    ``None`` when the file gave current densities without an area line;
    ``column`` is the file's current column (for messages).
    """

    source: str
    bias_v: np.ndarray
    current_density_a_cm2: np.ndarray
    area_um2: float | None = None
    temperature_k: float | None = None
    column: str = "current_density_a_cm2"

    @property
    def label(self) -> str:
        parts = [Path(self.source).name]
        if self.area_um2 is not None:
            parts.append(f"{self.area_um2:g} um^2")
        if self.temperature_k is not None:
            parts.append(f"{self.temperature_k:g} K")
        return ", ".join(parts)


def _setting(line: str, source: str, lineno: int) -> tuple[str, float] | None:
    body = line.lstrip("#").strip()
    if "=" not in body:
        return None
    key, _, value = (s.strip() for s in body.partition("="))
    if key not in SETTINGS:
        return None
    try:
        v = float(value)
    except ValueError:
        raise InputError(
            f"line {lineno}: {key} = {value!r} is not a number", source=source
        ) from None
    lo, hi = SETTINGS[key]
    if not (math.isfinite(v) and lo <= v <= hi):
        raise InputError(
            f"line {lineno}: {key} = {value!r} outside [{lo:g}, {hi:g}]", source=source
        )
    return key, v


def read_measured(path: str | Path) -> Measurement:
    """Read one measured sweep.

    Raises
    ------
    InputError
        Missing file, no header, a missing or duplicated current column, a
        non-numeric or non-finite cell (line and column named), fewer than
        :data:`MIN_POINTS` rows, biases of both polarities or not running strictly
        away from zero bias, more than one temperature, ``current_a`` without an
        ``# area_um2`` line.
    """
    source = str(path)
    settings, header, rows = _split_lines(_read_file(path, source), source)
    columns = _columns(header[1], settings, source=source, lineno=header[0])
    values = _cell_values(rows, columns, source)
    if len(rows) < MIN_POINTS:
        raise InputError(
            f"{len(rows)} data rows; a sweep needs at least {MIN_POINTS}", source=source
        )
    bias = values["bias_v"]
    direction = _sweep_direction(bias, [lineno for lineno, _ in rows], columns["bias_v"], source)
    temperature = settings.get("temperature_k")
    if "temperature_k" in values:
        t = values["temperature_k"]
        if np.ptp(t) > 0:
            raise InputError(
                f"column {columns['temperature_k'] + 1} (temperature_k): one file is one "
                "sweep at one temperature; put each temperature in its own file",
                source=source,
            )
        temperature = float(t[0])
    area = settings.get("area_um2")
    column = "current_a" if "current_a" in values else "current_density_a_cm2"
    if column == "current_a":
        assert area is not None  # the header check requires the area with current_a
        j = values["current_a"] / (area * 1e-8)  # um^2 -> cm^2
    else:
        j = values["current_density_a_cm2"]
    if np.all(j == 0):
        raise InputError("every current is zero", source=source)
    away = bias != 0
    if np.mean(direction * j[away] < 0) > 0.5:  # a few near zero bias: an offset, kept
        sign, other = ("positive", "negative") if direction > 0 else ("negative", "positive")
        raise InputError(
            f"column {column}: most currents are {other} on a {sign} sweep; the current "
            "carries the sign of the bias (probes swapped? flip the column's sign)",
            source=source,
        )
    if direction < 0:
        bias, j = bias[::-1], j[::-1]
    return Measurement(source, bias.copy(), j.copy(), area, temperature, column)


def _read_file(path: str | Path, source: str) -> str:
    """The file's text; one line when it is missing or unreadable."""
    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("file not found", source=source) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read file ({exc})", source=source) from None


def _split_lines(
    text: str, source: str
) -> tuple[dict[str, float], tuple[int, list[str]], list[tuple[int, list[str]]]]:
    """The settings of the comment lines, the header ``(line, cells)`` and the data rows
    ``(line, cells)`` of a measured file (lines from 1; blank lines skipped)."""
    settings: dict[str, float] = {}
    rows: list[tuple[int, list[str]]] = []
    header: tuple[int, list[str]] | None = None
    for lineno, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        if line.lstrip().startswith("#"):
            found = _setting(line, source, lineno)
            if found:
                settings[found[0]] = found[1]
            continue
        cells = [c.strip() for c in next(csv.reader([line]))]
        if header is None:
            header = (lineno, cells)
            if _is_number(cells[0]):
                raise InputError(
                    f"line {lineno}: no header; the first line must name the columns, "
                    "e.g. bias_v,current_density_a_cm2",
                    source=source,
                )
            continue
        rows.append((lineno, cells))
    if header is None:
        raise InputError("no header and no data", source=source)
    return settings, header, rows


def _cell_values(
    rows: list[tuple[int, list[str]]], columns: dict[str, int], source: str
) -> dict[str, np.ndarray]:
    """Each read column as an array over the data rows; one line naming the first cell
    that is empty, not a number or not finite."""
    values = {name: np.empty(len(rows)) for name in columns}
    for r, (lineno, cells) in enumerate(rows):
        for name, col in columns.items():
            where = f"line {lineno}, column {col + 1} ({name})"
            if col >= len(cells) or cells[col] == "":
                raise InputError(f"{where}: empty cell", source=source)
            if not _is_number(cells[col]):
                raise InputError(f"{where}: {cells[col]!r} is not a number", source=source)
            v = float(cells[col])
            if not math.isfinite(v):
                raise InputError(f"{where}: {cells[col]} is not a finite number", source=source)
            values[name][r] = v
    return values


def _sweep_direction(bias: np.ndarray, linenos: list[int], col: int, source: str) -> float:
    """+1 for a positive sweep (biases ``>= 0``, strictly increasing), -1 for a negative one
    (``<= 0``, strictly decreasing); the polarity is that of the bias farthest from zero. One
    line naming the first row that breaks the rule (``linenos``: the file line of each bias,
    ``col``: its column)."""
    end = float(bias[np.argmax(np.abs(bias))])
    polarity = 1.0 if end > 0 else -1.0
    wrong = np.nonzero(polarity * bias < 0)[0]
    back = np.nonzero(polarity * np.diff(bias) <= 0)[0] + 1
    if wrong.size:
        i = wrong[0]
        other = "negative" if polarity > 0 else "positive"
        rule = (
            f"{bias[i]:g} V in a sweep to {end:g} V; one file is one polarity, put the {other} "
            "biases in a file of their own"
        )
    elif back.size:
        i = back[0]
        way = "increasing" if polarity > 0 else "decreasing (a negative sweep)"
        rule = (
            f"biases must run strictly away from zero bias, {way}; {bias[i]:g} V follows "
            f"{bias[i - 1]:g} V"
        )
    else:
        return polarity
    raise InputError(f"line {linenos[i]}, column {col + 1} (bias_v): {rule}", source=source)


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _columns(
    header: list[str], settings: dict[str, float], *, source: str, lineno: int
) -> dict[str, int]:
    index = {name: i for i, name in enumerate(header)}
    if "bias_v" not in index:
        raise InputError(
            f"line {lineno}: the header has no bias_v column (found: {', '.join(header)})",
            source=source,
        )
    current = [c for c in CURRENT_COLUMNS if c in index]
    if len(current) != 1:
        raise InputError(
            f"line {lineno}: the header needs exactly one of {', '.join(CURRENT_COLUMNS)}",
            source=source,
        )
    if current[0] == "current_a" and "area_um2" not in settings:
        raise InputError(
            "current_a needs the mesa area: add a comment line '# area_um2 = ...' above the header",
            source=source,
        )
    out = {"bias_v": index["bias_v"], current[0]: index[current[0]]}
    if "temperature_k" in index:
        out["temperature_k"] = index["temperature_k"]
    return out
