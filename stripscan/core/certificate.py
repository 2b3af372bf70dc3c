"""The step tablet's certificate: its CSV, read with care, and the error every calibration input raises.

A certificate is a small table ``step,density[,uncertainty]`` from the
tablet's maker or a calibrated densitometer (densities per ISO 5-2).
"""

from __future__ import annotations

import csv
import io
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any



__all__ = ["CalibrationError", "Certificate", "parse_certificate", "read_certificate", "read_table_text", "decode_table_text", "MAX_STEPS", "MAX_TABLE_BYTES"]

#: Most steps a strip, tablet or certificate may have.  Tablets have 11, 21 or
#: 31 steps (common practice); the bound keeps a typing slip such as a step
#: ``1e12`` from asking for a table of a trillion rows.
MAX_STEPS = 100


class CalibrationError(ValueError):
    """A certificate, tablet scan or calibration file cannot be used."""


@dataclass(frozen=True)
class Certificate:
    """Certified densities of a reference step tablet.

    Attributes
    ----------
    steps : tuple of int
        1, 2, ..., N.
    densities : tuple of float
        Certified diffuse transmission density of each step, increasing.
    uncertainties : tuple of float or None
        Expanded or standard uncertainty per step as the certificate gives.
    source : str
        File the certificate came from.
    """

    steps: tuple[int, ...]
    densities: tuple[float, ...]
    uncertainties: tuple[float, ...] | None = None
    source: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "steps": list(self.steps),
            "densities": list(self.densities),
            "uncertainties": list(self.uncertainties) if self.uncertainties else None,
            "source": self.source,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Certificate":
        unc = data.get("uncertainties")
        return cls(tuple(data["steps"]), tuple(data["densities"]), tuple(unc) if unc else None, data.get("source", ""))


def _csv_rows(text: str, source: str):
    """CSV rows of ``text``, lines ended by LF, CR LF or a lone CR; csv's own errors name the source."""
    reader = csv.reader(io.StringIO(text, newline=None))
    try:
        yield from reader
    except csv.Error as exc:
        raise CalibrationError(f"{source}, line {reader.line_num}: not CSV text ({exc})") from None


def parse_certificate(text: str, *, source: str = "<certificate>") -> Certificate:
    """Parse our certificate CSV.

    Format: one row per step, ``step,density`` (optionally a third column
    ``uncertainty``).  A header row naming the columns, blank lines and
    lines starting with ``#`` are allowed.  Steps must run 1..N with no gap
    or repeat; densities must be numbers that increase with the step.

    Raises
    ------
    CalibrationError
        Naming the source and the line at fault.
    """
    rows: dict[int, tuple[float, float | None]] = {}
    has_unc = None
    for lineno, row in enumerate(_csv_rows(text, source), start=1):
        cells = [c.strip() for c in row]
        if not cells or all(not c for c in cells) or cells[0].startswith("#"):
            continue
        if not rows and cells[0].lower() in ("step", "steps", "step number"):
            continue
        if len(cells) < 2:
            raise CalibrationError(f"{source}, line {lineno}: expected 'step,density', got {','.join(cells)!r}")
        try:
            step_value = float(cells[0])
        except ValueError:
            raise CalibrationError(f"{source}, line {lineno}: step {cells[0]!r} is not a number") from None
        if not math.isfinite(step_value) or step_value != int(step_value) or step_value < 1:
            raise CalibrationError(f"{source}, line {lineno}: step {cells[0]!r} is not a whole number from 1")
        if step_value > MAX_STEPS:
            raise CalibrationError(
                f"{source}, line {lineno}: step {cells[0]!r} is beyond the {MAX_STEPS} steps "
                "a strip or tablet may have")
        step = int(step_value)
        try:
            density = float(cells[1])
        except ValueError:
            raise CalibrationError(f"{source}, line {lineno}: density {cells[1]!r} is not a number") from None
        if not math.isfinite(density) or not -0.1 <= density <= 8.0:
            raise CalibrationError(f"{source}, line {lineno}: density {cells[1]!r} is not a plausible optical density")
        unc = None
        if len(cells) > 2 and cells[2]:
            try:
                unc = float(cells[2])
            except ValueError:
                raise CalibrationError(f"{source}, line {lineno}: uncertainty {cells[2]!r} is not a number") from None
            if not math.isfinite(unc) or not 0.0 <= unc <= 1.0:
                raise CalibrationError(
                    f"{source}, line {lineno}: uncertainty {cells[2]!r} is not a plausible density "
                    "uncertainty (0 to 1 OD)")
        if step in rows:
            raise CalibrationError(f"{source}, line {lineno}: step {step} is listed twice")
        rows[step] = (density, unc)
        has_unc = (unc is not None) if has_unc is None else (has_unc and unc is not None)
    if len(rows) < 3:
        raise CalibrationError(f"{source}: a certificate needs at least 3 steps, found {len(rows)}")
    steps = sorted(rows)
    missing = sorted(set(range(1, steps[-1] + 1)) - set(steps))
    if missing:
        which = f"step {missing[0]} is" if len(missing) == 1 else f"steps {', '.join(map(str, missing))} are"
        raise CalibrationError(f"{source}: {which} missing (steps must run 1..N)")
    densities = [rows[s][0] for s in steps]
    for prev, step in zip(steps, steps[1:]):
        if not rows[step][0] > rows[prev][0]:
            raise CalibrationError(
                f"{source}: densities must increase with the step; step {step} ({rows[step][0]:g}) "
                f"is not denser than step {prev} ({rows[prev][0]:g})"
            )
    uncertainties = tuple(rows[s][1] for s in steps) if has_unc else None  # type: ignore[misc]
    return Certificate(tuple(steps), tuple(densities), uncertainties, source)


#: Largest small text file (certificate, exposure table) read, bytes: a
#: 100-step table is a few kB, so anything bigger is the wrong file.
MAX_TABLE_BYTES = 1 << 20


def decode_table_text(raw: bytes) -> str | None:
    """The text of a small table saved by a spreadsheet or an editor.

    UTF-8 (with or without a byte order mark), UTF-16 with a byte order mark
    (a spreadsheet's "Unicode text"), and otherwise Windows-1252 / Latin-1,
    the other encoding such programs write.  A table holds digits, commas
    and a few words, so a wrong guess between the last two can only change
    a letter in a comment or a header.

    Returns
    -------
    str or None
        None when the bytes are not text at all (NUL bytes without a UTF-16
        byte order mark).
    """
    import codecs

    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError:
            return None
    if b"\x00" in raw:
        return None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        pass
    try:
        return raw.decode("cp1252")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


def read_table_text(path: str | os.PathLike[str], what: str, expected: str) -> str:
    """Read a small text table, see :func:`decode_table_text`; errors name the file.

    Parameters
    ----------
    path : path-like
    what : str
        The kind of file, for messages ("certificate").
    expected : str
        What the file should hold, for messages ("CSV 'step,density'").
    """
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_TABLE_BYTES + 1)
    except FileNotFoundError:
        raise CalibrationError(f"{path}: no such {what} file") from None
    except IsADirectoryError:
        raise CalibrationError(f"{path}: is a folder, not a {what} file") from None
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    if len(raw) > MAX_TABLE_BYTES:
        raise CalibrationError(f"{path}: over {MAX_TABLE_BYTES // 1024} kB, too large for a {what} ({expected})")
    text = decode_table_text(raw)
    if text is None:
        raise CalibrationError(
            f"{path}: not a text file (expected {expected}, saved as UTF-8, UTF-16 or Latin-1 text)")
    return text


def read_certificate(path: str | os.PathLike[str]) -> Certificate:
    """Read a certificate CSV file, see :func:`parse_certificate` and :func:`read_table_text`."""
    text = read_table_text(path, "certificate", "CSV 'step,density'")
    return parse_certificate(text, source=str(Path(path)))
