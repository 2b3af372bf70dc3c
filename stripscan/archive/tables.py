"""The archive's tables as the service speaks to them: column lists, shared SELECTs, small SQL builders.

Portable SQL with ``?`` placeholders; every backend runs it as written (or translates the placeholders).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any


from stripscan.archive.records import (
    FIGURES,
    EmulsionLot,
    FilmType,
    Processor,
    Sensitometer,
)


# The film's date, as in Snapshot.date: processing, exposure, scan, storage.
DAY = "COALESCE(s.processed_on, s.exposed_on, s.scanned_on, substr(s.created_at, 1, 10))"

SNAPSHOT_COLUMNS = (
    "id", "created_at", "lot_id", "processor", "sensitometer", "calibration_hash", "operator",
    "exposed_on", "processed_on", "scanned_on", "scan_path", "scan_sha256", "strip_index", *FIGURES,
    "revises", "revision_reason", "retired_at", "retired_reason", "program_version", "notes",
)
DATA_COLUMNS = ("snapshot_id", "scan_json", "settings_json", "warnings_json", "strip_json", "preview_png")
SNAPSHOT_SELECT = (
    f"SELECT {', '.join('s.' + c for c in SNAPSHOT_COLUMNS)}, {', '.join('d.' + c for c in DATA_COLUMNS)} "
    "FROM snapshots s JOIN snapshot_data d ON d.snapshot_id = s.id"
)


def insert_sql(table: str, columns: Sequence[str]) -> str:
    return f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' for _ in columns)})"


# What a correction of a QC entry may change; a wrong processor is another matter.
QC_DENSITIES = ("base_fog", "mid_density", "density_difference")
QC_CORRECTABLE = (*QC_DENSITIES, "date", "note", "action")

# The latest day of a processor's log: of entries nothing corrects (a
# correction may have moved a wrongly dated entry to another day).
QC_LATEST_DAY = ("SELECT max(e.date) FROM qc_entries e WHERE e.processor = ? AND e.id IS NOT ? "
                  "AND NOT EXISTS (SELECT 1 FROM qc_entries c WHERE c.corrects = e.id)")

STEP_COLUMNS = ("snapshot_id", "step", "log_exposure", "od", "od_sd", "pixels", "in_range", "excluded")

SUMMARY_SELECT = (
    f"SELECT s.id, s.created_at, {DAY} AS day, s.lot_id, s.processor, s.operator, s.strip_index, "
    f"{', '.join('s.' + f for f in FIGURES)}, s.revises, n.id, s.retired_at, s.retired_reason, "
    "s.scan_path FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id"
)

# Reference data: record class -> (table, key column, plain word for messages).
# The key column has the same name as the record's key field.
REFERENCE: dict[type, tuple[str, str, str]] = {
    FilmType: ("film_types", "name", "film type"),
    EmulsionLot: ("emulsion_lots", "lot_id", "lot"),
    Processor: ("processors", "name", "processor"),
    Sensitometer: ("sensitometers", "sensitometer_id", "sensitometer"),
}
# Their kind in the hash chain.
CHAIN_KIND = {FilmType: "film_type", EmulsionLot: "lot", Processor: "processor", Sensitometer: "sensitometer"}

# Marks "leave as it is" where None is a value.
KEEP: Any = object()


# A step is read only where it was in the calibrated range and not excluded (a join on snapshot_steps
# aliased {0}, the step number a parameter).
USABLE_STEP = ("{0}.snapshot_id = s.id AND {0}.step = ? AND {0}.in_range = 1 AND {0}.excluded = 0 "
                "AND {0}.od IS NOT NULL")
