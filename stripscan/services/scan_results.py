"""A scan's analysis as the JSON file ``stripscan analyze -o`` writes, and a batch's worker that writes it.

:func:`analyse_into_folder` is what each worker process of a batch runs
(``stripscan analyze FOLDER -o OUTDIR``, and the window's batch): it reads
one scan and writes its result file, whole or not at all, and hands back
only a small record.  No Qt, no sqlite3.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from stripscan import CAUTION
from stripscan._shared.atomic import write_text

__all__ = ["RESULT_SUFFIX", "WrittenResult", "analyse_into_folder", "analysis_json", "check_result_names",
           "result_path"]

#: What a scan's result file is called after the scan: ``NAME.results.json`` (as the window offers to save it).
RESULT_SUFFIX = ".results.json"


@dataclass(frozen=True)
class WrittenResult:
    """One scan read and its result written.

    Attributes
    ----------
    scan, output : Path
        The scan, and its result file.
    strips : int
        Strips found.
    warnings : tuple of str
        The analysis's warnings (they are in the file too).
    """

    scan: Path
    output: Path
    strips: int
    warnings: tuple[str, ...]


def result_path(scan: str | os.PathLike[str], folder: str | os.PathLike[str]) -> Path:
    """Where a batch writes ``scan``'s result: ``folder/NAME.results.json``."""
    return Path(folder) / (Path(scan).stem + RESULT_SUFFIX)


def check_result_names(scans: Sequence[str | os.PathLike[str]], folder: str | os.PathLike[str]) -> None:
    """Refuse a batch in which two scans would write the same result file.

    Raises
    ------
    ValueError
        Naming both scans and the file they share.
    """
    seen: dict[Path, Path] = {}
    for scan in scans:
        target = result_path(scan, folder)
        if target in seen:
            raise ValueError(f"{seen[target]} and {scan} would both be written to {target}: rename one, or "
                             "analyse them into different folders")
        seen[target] = Path(scan)


def _gradient_curve(strip: Any) -> dict | None:
    """The gradient curve (dD/dlog E) of a strip's usable steps, every 0.05 log E."""
    import numpy as np

    from stripscan.core.curve import strip_curve

    curve = strip_curve(strip)
    if curve is None:
        return None
    count = int(round((curve.log_exposure[-1] - curve.log_exposure[0]) / 0.05)) + 1
    grid = np.linspace(curve.log_exposure[0], curve.log_exposure[-1], max(count, 2))
    return {"log_exposure": [round(float(v), 4) for v in grid],
            "gradient": [round(float(v), 4) for v in curve.gradient(grid)]}


def analysis_json(analysis: Any) -> dict[str, Any]:
    """The analysis's record, each strip with its gradient curve, and the caution."""
    data = analysis.to_dict()
    for strip, out in zip(analysis.strips, data["strips"]):
        out["gradient_curve"] = _gradient_curve(strip)
    data["caution"] = CAUTION
    return data


def analyse_into_folder(scan: str | os.PathLike[str], *, folder: str | os.PathLike[str], calibration: Any = None,
                        options: Any = None, dpi: float | None = None, channel: str = "auto",
                        flat_field_scan: str | os.PathLike[str] | None = None,
                        tablet_certificate: Any = None) -> WrittenResult:
    """Analyse one scan (as :func:`~stripscan.core.pipeline.analyze_scan`) and write its result file.

    Parameters
    ----------
    scan : path-like
    folder : path-like
        Where :func:`result_path` puts the result.
    calibration, options, dpi, channel, flat_field_scan, tablet_certificate
        As :func:`~stripscan.core.pipeline.analyze_scan` takes them (None
        options: the defaults).

    Returns
    -------
    WrittenResult
    """
    from stripscan.core.pipeline import analyze_scan
    from stripscan.core.reading import AnalysisOptions

    analysis = analyze_scan(scan, calibration=calibration, options=options or AnalysisOptions(), dpi=dpi,
                            channel=channel, flat_field_scan=flat_field_scan, tablet_certificate=tablet_certificate)
    output = result_path(scan, folder)
    try:
        write_text(output, json.dumps(analysis_json(analysis), indent=1, ensure_ascii=False) + "\n")
    except OSError as exc:
        raise OSError(f"{output}: cannot write ({exc.strerror or exc})") from None
    return WrittenResult(Path(scan), output, len(analysis.strips), tuple(analysis.warnings))
