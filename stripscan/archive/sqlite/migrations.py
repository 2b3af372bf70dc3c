"""Schema of the lot archive, as a list of forward steps.

The schema version of a file is kept in ``PRAGMA user_version``.  Opening
an archive applies, in order, every step above the file's version, each in
its own transaction together with the new ``user_version``, so a file is
always at exactly one version.

Rules for whoever adds a step
-----------------------------
* Never edit a step that has been released: files out there were built by
  it.  Add a new step instead.
* A step that adds a column to ``snapshots`` must drop and recreate the
  ``snapshots_frozen`` trigger with the new column in its list, otherwise
  the new column would be open to UPDATE.  (A test walks the table's
  columns to catch this.)
* From version 4 on every record is in the hash chain (:mod:`.chain`),
  whose content hash covers every non-NULL column: a step that adds a
  column to a chained table gives it a NULL default, or old records would
  no longer match.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable
from dataclasses import dataclass

from stripscan.archive import chain

__all__ = ["Migration", "MIGRATIONS", "LATEST_VERSION", "APPLICATION_ID", "CHAIN_VERSION"]

#: Written to ``PRAGMA application_id`` so a stripscan archive can be told
#: from any other SQLite file ("SSAR" in ASCII).
APPLICATION_ID = 0x53534152


@dataclass(frozen=True)
class Migration:
    """One forward step of the schema: run ``statements`` to go from ``version - 1`` to ``version``."""

    version: int
    summary: str
    statements: tuple[str, ...]
    #: Run after the statements, in the same transaction, for what SQL alone cannot do.
    code: Callable[[sqlite3.Connection], None] | None = None


_V1 = (
    """CREATE TABLE film_types (
        name TEXT PRIMARY KEY NOT NULL CHECK (length(trim(name)) > 0),
        description TEXT NOT NULL DEFAULT ''
    )""",
    """CREATE TABLE emulsion_lots (
        lot_id TEXT PRIMARY KEY NOT NULL CHECK (length(trim(lot_id)) > 0),
        film_type TEXT REFERENCES film_types(name),
        expiry_date TEXT CHECK (expiry_date IS NULL OR date(expiry_date) IS expiry_date),
        received_date TEXT CHECK (received_date IS NULL OR date(received_date) IS received_date),
        notes TEXT NOT NULL DEFAULT ''
    )""",
    """CREATE TABLE processors (
        name TEXT PRIMARY KEY NOT NULL CHECK (length(trim(name)) > 0),
        place TEXT NOT NULL DEFAULT '',
        chemistry TEXT NOT NULL DEFAULT '',
        developer_temperature_c REAL,
        cycle_time_s REAL,
        notes TEXT NOT NULL DEFAULT ''
    )""",
    """CREATE TABLE sensitometers (
        sensitometer_id TEXT PRIMARY KEY NOT NULL CHECK (length(trim(sensitometer_id)) > 0),
        description TEXT NOT NULL DEFAULT '',
        log_exposures_json TEXT NOT NULL CHECK (json_valid(log_exposures_json))
    )""",
    # A calibration is stored once and found by the sha256 of its text.
    """CREATE TABLE calibrations (
        hash TEXT PRIMARY KEY NOT NULL CHECK (length(hash) = 64),
        json TEXT NOT NULL CHECK (json_valid(json))
    )""",
    """CREATE TABLE snapshots (
        id INTEGER PRIMARY KEY,
        created_at TEXT NOT NULL
            CHECK (created_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T*Z'),
        lot_id TEXT NOT NULL REFERENCES emulsion_lots(lot_id),
        processor TEXT REFERENCES processors(name),
        sensitometer TEXT REFERENCES sensitometers(sensitometer_id),
        calibration_hash TEXT REFERENCES calibrations(hash),
        operator TEXT NOT NULL DEFAULT '',
        exposed_on TEXT CHECK (exposed_on IS NULL OR date(exposed_on) IS exposed_on),
        processed_on TEXT CHECK (processed_on IS NULL OR date(processed_on) IS processed_on),
        scanned_on TEXT CHECK (scanned_on IS NULL OR date(scanned_on) IS scanned_on),
        scan_path TEXT NOT NULL,
        scan_sha256 TEXT NOT NULL CHECK (length(scan_sha256) = 64),
        strip_index INTEGER NOT NULL,
        base_fog REAL,
        dmax REAL,
        speed_log_exposure REAL,
        average_gradient REAL,
        gamma REAL,
        latitude_log_exposure REAL,
        mid_density REAL,
        density_difference REAL,
        revises INTEGER REFERENCES snapshots(id) CHECK (revises IS NULL OR revises < id),
        revision_reason TEXT,
        retired_at TEXT,
        retired_reason TEXT,
        program_version TEXT NOT NULL DEFAULT '',
        notes TEXT NOT NULL DEFAULT '',
        CHECK ((revises IS NULL) = (revision_reason IS NULL)),
        CHECK ((retired_at IS NULL) = (retired_reason IS NULL))
    )""",
    # The bulky part of a snapshot lives beside it, one row each, so that
    # listings and trends scan a table of small rows.
    """CREATE TABLE snapshot_data (
        snapshot_id INTEGER PRIMARY KEY REFERENCES snapshots(id),
        scan_json TEXT NOT NULL CHECK (json_valid(scan_json)),
        settings_json TEXT NOT NULL DEFAULT '{}' CHECK (json_valid(settings_json)),
        warnings_json TEXT NOT NULL DEFAULT '[]' CHECK (json_valid(warnings_json)),
        strip_json TEXT NOT NULL CHECK (json_valid(strip_json)),
        preview_png BLOB CHECK (preview_png IS NULL OR (length(preview_png) <= 65536
            AND substr(preview_png, 1, 8) = X'89504E470D0A1A0A'))
    )""",
    # One revision per snapshot keeps a correction chain a straight line.
    "CREATE UNIQUE INDEX snapshots_revises ON snapshots(revises) WHERE revises IS NOT NULL",
    "CREATE INDEX snapshots_lot ON snapshots(lot_id)",
    """CREATE TABLE snapshot_steps (
        snapshot_id INTEGER NOT NULL REFERENCES snapshots(id),
        step INTEGER NOT NULL,
        log_exposure REAL,
        od REAL,
        od_sd REAL,
        pixels INTEGER NOT NULL,
        in_range INTEGER NOT NULL CHECK (in_range IN (0, 1)),
        excluded INTEGER NOT NULL CHECK (excluded IN (0, 1)),
        PRIMARY KEY (snapshot_id, step)
    ) WITHOUT ROWID""",
    """CREATE TABLE qc_entries (
        processor TEXT NOT NULL REFERENCES processors(name),
        date TEXT NOT NULL CHECK (date(date) IS date),
        base_fog REAL,
        mid_density REAL,
        density_difference REAL,
        source TEXT NOT NULL CHECK (source IN ('scan', 'manual')),
        snapshot_id INTEGER REFERENCES snapshots(id),
        note TEXT NOT NULL DEFAULT '',
        action TEXT NOT NULL DEFAULT '',
        UNIQUE (processor, date)
    )""",
    """CREATE TABLE qc_events (
        id INTEGER PRIMARY KEY,
        processor TEXT NOT NULL REFERENCES processors(name),
        date TEXT NOT NULL CHECK (date(date) IS date),
        kind TEXT NOT NULL CHECK (length(trim(kind)) > 0),
        note TEXT NOT NULL DEFAULT ''
    )""",
    "CREATE INDEX qc_events_processor ON qc_events(processor, date)",
    """CREATE TABLE qc_settings (
        processor TEXT PRIMARY KEY NOT NULL REFERENCES processors(name),
        settings_json TEXT NOT NULL CHECK (json_valid(settings_json)),
        updated_at TEXT NOT NULL
    )""",
    """CREATE TABLE crossovers (
        id INTEGER PRIMARY KEY,
        processor TEXT NOT NULL REFERENCES processors(name),
        date TEXT NOT NULL CHECK (date(date) IS date),
        record_json TEXT NOT NULL CHECK (json_valid(record_json))
    )""",
    "CREATE INDEX crossovers_processor ON crossovers(processor, date)",
    # The audit trail is enforced in the file itself, so that no other tool
    # (or a slip in this one) can rewrite history.  A BEFORE INSERT guard is
    # needed too: INSERT OR REPLACE deletes the old row without firing the
    # DELETE trigger unless recursive triggers are on.
    """CREATE TRIGGER snapshots_no_delete BEFORE DELETE ON snapshots
    BEGIN SELECT RAISE(ABORT, 'snapshots are never deleted; retire the snapshot instead'); END""",
    """CREATE TRIGGER snapshots_no_replace BEFORE INSERT ON snapshots
    WHEN EXISTS (SELECT 1 FROM snapshots WHERE id = NEW.id)
    BEGIN SELECT RAISE(ABORT, 'snapshot ids are never reused or replaced'); END""",
    """CREATE TRIGGER snapshots_frozen BEFORE UPDATE OF
        id, created_at, lot_id, processor, sensitometer, calibration_hash, operator,
        exposed_on, processed_on, scanned_on, scan_path, scan_sha256, strip_index,
        base_fog, dmax, speed_log_exposure, average_gradient, gamma, latitude_log_exposure,
        mid_density, density_difference, revises, revision_reason, program_version, notes
        ON snapshots
    BEGIN SELECT RAISE(ABORT, 'snapshots are never changed; store a revision instead'); END""",
    """CREATE TRIGGER snapshots_retire_once BEFORE UPDATE OF retired_at, retired_reason ON snapshots
    WHEN OLD.retired_at IS NOT NULL OR NEW.retired_at IS NULL
        OR NEW.retired_reason IS NULL OR length(trim(NEW.retired_reason)) = 0
    BEGIN SELECT RAISE(ABORT, 'a snapshot is retired once, with a reason, and stays retired'); END""",
    """CREATE TRIGGER snapshot_data_no_update BEFORE UPDATE ON snapshot_data
    BEGIN SELECT RAISE(ABORT, 'stored snapshot data is never changed'); END""",
    """CREATE TRIGGER snapshot_data_no_delete BEFORE DELETE ON snapshot_data
    BEGIN SELECT RAISE(ABORT, 'stored snapshot data is never deleted'); END""",
    """CREATE TRIGGER snapshot_data_no_replace BEFORE INSERT ON snapshot_data
    WHEN EXISTS (SELECT 1 FROM snapshot_data WHERE snapshot_id = NEW.snapshot_id)
    BEGIN SELECT RAISE(ABORT, 'stored snapshot data is never replaced'); END""",
    """CREATE TRIGGER snapshot_steps_no_update BEFORE UPDATE ON snapshot_steps
    BEGIN SELECT RAISE(ABORT, 'stored step densities are never changed'); END""",
    """CREATE TRIGGER snapshot_steps_no_delete BEFORE DELETE ON snapshot_steps
    BEGIN SELECT RAISE(ABORT, 'stored step densities are never deleted'); END""",
    """CREATE TRIGGER snapshot_steps_no_replace BEFORE INSERT ON snapshot_steps
    WHEN EXISTS (SELECT 1 FROM snapshot_steps WHERE snapshot_id = NEW.snapshot_id AND step = NEW.step)
    BEGIN SELECT RAISE(ABORT, 'stored step densities are never replaced'); END""",
    """CREATE TRIGGER calibrations_no_update BEFORE UPDATE ON calibrations
    BEGIN SELECT RAISE(ABORT, 'a stored calibration is never changed'); END""",
    """CREATE TRIGGER calibrations_no_delete BEFORE DELETE ON calibrations
    BEGIN SELECT RAISE(ABORT, 'a stored calibration is never deleted'); END""",
    """CREATE TRIGGER calibrations_no_replace BEFORE INSERT ON calibrations
    WHEN EXISTS (SELECT 1 FROM calibrations WHERE hash = NEW.hash)
    BEGIN SELECT RAISE(ABORT, 'a stored calibration is never replaced'); END""",
)

# v2: remarks added to a snapshot after the fact (an auditor's "checked,
# see service report") without touching the snapshot, and an index for
# listings and trends by processor.
_V2 = (
    """CREATE TABLE snapshot_notes (
        id INTEGER PRIMARY KEY,
        snapshot_id INTEGER NOT NULL REFERENCES snapshots(id),
        created_at TEXT NOT NULL
            CHECK (created_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T*Z'),
        author TEXT NOT NULL DEFAULT '',
        text TEXT NOT NULL CHECK (length(trim(text)) > 0)
    )""",
    "CREATE INDEX snapshot_notes_snapshot ON snapshot_notes(snapshot_id)",
    """CREATE TRIGGER snapshot_notes_no_update BEFORE UPDATE ON snapshot_notes
    BEGIN SELECT RAISE(ABORT, 'notes are never changed; add another note'); END""",
    """CREATE TRIGGER snapshot_notes_no_delete BEFORE DELETE ON snapshot_notes
    BEGIN SELECT RAISE(ABORT, 'notes are never deleted; add another note'); END""",
    """CREATE TRIGGER snapshot_notes_no_replace BEFORE INSERT ON snapshot_notes
    WHEN EXISTS (SELECT 1 FROM snapshot_notes WHERE id = NEW.id)
    BEGIN SELECT RAISE(ABORT, 'notes are never replaced; add another note'); END""",
    "CREATE INDEX snapshots_processor ON snapshots(processor)",
)

# v3: processor QC entries get an id, the UTC time they were recorded, a
# link from a same-day repeat strip to the entry it repeats, and a link plus
# a reason from a correction to the entry it corrects; and, like snapshots,
# they can no longer be changed, deleted or replaced.
#
# SQLite cannot drop the old UNIQUE (processor, date), so the table is
# rebuilt.  The old one is renamed first, which lets the new one be created
# under its final name and point at itself; nothing else in the schema
# (trigger, view, foreign key) names qc_entries, so the rename rewrites
# nothing else.  Old rows keep their rowid as their id and get NULL for
# recorded_at: the time they were recorded was never kept.
_V3 = (
    "ALTER TABLE qc_entries RENAME TO qc_entries_v2",
    """CREATE TABLE qc_entries (
        id INTEGER PRIMARY KEY,
        processor TEXT NOT NULL REFERENCES processors(name),
        date TEXT NOT NULL CHECK (date(date) IS date),
        base_fog REAL,
        mid_density REAL,
        density_difference REAL,
        source TEXT NOT NULL CHECK (source IN ('scan', 'manual')),
        snapshot_id INTEGER REFERENCES snapshots(id),
        note TEXT NOT NULL DEFAULT '',
        action TEXT NOT NULL DEFAULT '',
        recorded_at TEXT CHECK (recorded_at IS NULL
            OR recorded_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T*Z'),
        repeat_of INTEGER REFERENCES qc_entries(id) CHECK (repeat_of IS NULL OR repeat_of < id),
        corrects INTEGER REFERENCES qc_entries(id) CHECK (corrects IS NULL OR corrects < id),
        reason TEXT CHECK (reason IS NULL OR length(trim(reason)) > 0),
        CHECK (repeat_of IS NULL OR corrects IS NULL),
        CHECK ((corrects IS NULL) = (reason IS NULL))
    )""",
    """INSERT INTO qc_entries (id, processor, date, base_fog, mid_density, density_difference, source,
        snapshot_id, note, action)
    SELECT rowid, processor, date, base_fog, mid_density, density_difference, source, snapshot_id, note, action
    FROM qc_entries_v2 ORDER BY rowid""",
    "DROP TABLE qc_entries_v2",
    # The old rule, kept for a day's first strip: repeats and corrections are linked to it.
    """CREATE UNIQUE INDEX qc_entries_first_strip ON qc_entries(processor, date)
    WHERE repeat_of IS NULL AND corrects IS NULL""",
    # An entry is repeated at most once and corrected at most once: chains stay straight lines.
    "CREATE UNIQUE INDEX qc_entries_repeat_of ON qc_entries(repeat_of) WHERE repeat_of IS NOT NULL",
    "CREATE UNIQUE INDEX qc_entries_corrects ON qc_entries(corrects) WHERE corrects IS NOT NULL",
    """CREATE TRIGGER qc_entries_no_update BEFORE UPDATE ON qc_entries
    BEGIN SELECT RAISE(ABORT, 'QC entries are never changed; store a correction instead'); END""",
    """CREATE TRIGGER qc_entries_no_delete BEFORE DELETE ON qc_entries
    BEGIN SELECT RAISE(ABORT, 'QC entries are never deleted; store a correction instead'); END""",
    # INSERT OR REPLACE would delete the row holding any of the unique keys
    # without firing the DELETE trigger, so every key is guarded here.
    """CREATE TRIGGER qc_entries_no_replace BEFORE INSERT ON qc_entries
    WHEN EXISTS (SELECT 1 FROM qc_entries WHERE id = NEW.id)
        OR EXISTS (SELECT 1 FROM qc_entries WHERE repeat_of = NEW.repeat_of)
        OR EXISTS (SELECT 1 FROM qc_entries WHERE corrects = NEW.corrects)
    BEGIN SELECT RAISE(ABORT, 'QC entries are never replaced; an entry is repeated once and corrected once at most');
    END""",
    """CREATE TRIGGER qc_entries_one_first_strip BEFORE INSERT ON qc_entries
    WHEN NEW.repeat_of IS NULL AND NEW.corrects IS NULL AND EXISTS (
        SELECT 1 FROM qc_entries WHERE processor = NEW.processor AND date = NEW.date
        AND repeat_of IS NULL AND corrects IS NULL)
    BEGIN SELECT RAISE(ABORT, 'one first QC strip per processor and day; store a repeat or a correction instead');
    END""",
    """CREATE TRIGGER qc_entries_same_day BEFORE INSERT ON qc_entries
    WHEN (NEW.repeat_of IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.repeat_of AND processor = NEW.processor AND date = NEW.date))
        OR (NEW.corrects IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.corrects AND processor = NEW.processor AND date = NEW.date))
    BEGIN SELECT RAISE(ABORT, 'a repeat or a correction names an entry of the same processor and day'); END""",
)

def _no_change(table: str, what: str) -> tuple[str, ...]:
    """Triggers that keep a table's rows as stored: no UPDATE, no DELETE, no INSERT OR REPLACE of an id."""
    return (
        f"""CREATE TRIGGER {table}_no_update BEFORE UPDATE ON {table}
        BEGIN SELECT RAISE(ABORT, '{what} are never changed; store a new one instead'); END""",
        f"""CREATE TRIGGER {table}_no_delete BEFORE DELETE ON {table}
        BEGIN SELECT RAISE(ABORT, '{what} are never deleted'); END""",
        f"""CREATE TRIGGER {table}_no_replace BEFORE INSERT ON {table}
        WHEN EXISTS (SELECT 1 FROM {table} WHERE id = NEW.id)
        BEGIN SELECT RAISE(ABORT, '{what} are never replaced'); END""",
    )


# An entry "holds" its day while nothing corrects it: a correction may move
# a wrongly dated entry to another day, which frees the old one.
_HOLDS_DAY = "NOT EXISTS (SELECT 1 FROM qc_entries c WHERE c.corrects = e.id)"

# v4: a QC history that cannot be rewritten unseen.
# * QC entries: ``entered_late`` marks an entry stored after a later day of
#   its processor (a missed day entered late, or a correction that moves a
#   wrong date back); such an entry is refused unless marked.  A correction
#   may fix the date: it names the entry it corrects and carries the right
#   date, and the old day is free again.
# * Events and crossovers can no longer be changed or deleted.
# * QC settings become a history: every change is a new row with its time
#   and reason; the latest row of a processor is in force.
# * Lots may have their film type, expiry and received dates filled in
#   later; the lot's key never changes.
# * ``record_chain``: the hash chain over every stored record (see chain.py),
#   built here for the records already stored.
_V4 = (
    "ALTER TABLE qc_entries ADD COLUMN entered_late INTEGER NOT NULL DEFAULT 0 CHECK (entered_late IN (0, 1))",
    "DROP INDEX qc_entries_first_strip",
    # What that unique index gave the day and date-order look-ups, without the uniqueness a moved date breaks.
    "CREATE INDEX qc_entries_day ON qc_entries(processor, date)",
    "DROP TRIGGER qc_entries_one_first_strip",
    "DROP TRIGGER qc_entries_same_day",
    f"""CREATE TRIGGER qc_entries_one_entry_a_day BEFORE INSERT ON qc_entries
    WHEN NEW.repeat_of IS NULL
        AND (NEW.corrects IS NULL OR NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.corrects AND date = NEW.date))
        AND EXISTS (SELECT 1 FROM qc_entries e WHERE e.processor = NEW.processor AND e.date = NEW.date
            AND {_HOLDS_DAY})
    BEGIN SELECT RAISE(ABORT, 'one QC entry in use per processor and day; store a repeat or a correction instead');
    END""",
    """CREATE TRIGGER qc_entries_links BEFORE INSERT ON qc_entries
    WHEN (NEW.repeat_of IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.repeat_of AND processor = NEW.processor AND date = NEW.date))
        OR (NEW.corrects IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.corrects AND processor = NEW.processor))
    BEGIN SELECT RAISE(ABORT, 'a repeat names an entry of the same processor and day, a correction one of the same processor');
    END""",
    f"""CREATE TRIGGER qc_entries_late BEFORE INSERT ON qc_entries
    WHEN NEW.entered_late = 0
        AND NOT (NEW.corrects IS NOT NULL AND EXISTS (SELECT 1 FROM qc_entries WHERE id = NEW.corrects
            AND date = NEW.date))
        AND EXISTS (SELECT 1 FROM qc_entries e WHERE e.processor = NEW.processor
        AND e.date > NEW.date AND e.id IS NOT NEW.corrects AND {_HOLDS_DAY})
    BEGIN SELECT RAISE(ABORT, 'a QC entry dated before the latest day of its processor is stored marked as entered late');
    END""",
    *_no_change("qc_events", "QC events"),
    *_no_change("crossovers", "crossover records"),
    "ALTER TABLE qc_settings RENAME TO qc_settings_v3",
    """CREATE TABLE qc_settings (
        id INTEGER PRIMARY KEY,
        processor TEXT NOT NULL REFERENCES processors(name),
        settings_json TEXT NOT NULL CHECK (json_valid(settings_json)),
        updated_at TEXT NOT NULL,
        reason TEXT NOT NULL DEFAULT ''
    )""",
    """INSERT INTO qc_settings (processor, settings_json, updated_at)
    SELECT processor, settings_json, updated_at FROM qc_settings_v3 ORDER BY updated_at, processor""",
    "DROP TABLE qc_settings_v3",
    "CREATE INDEX qc_settings_processor ON qc_settings(processor, id)",
    *_no_change("qc_settings", "QC settings rows"),
    """CREATE TRIGGER emulsion_lots_key BEFORE UPDATE OF lot_id ON emulsion_lots
    BEGIN SELECT RAISE(ABORT, 'a lot id is never changed'); END""",
    """CREATE TRIGGER emulsion_lots_no_delete BEFORE DELETE ON emulsion_lots
    BEGIN SELECT RAISE(ABORT, 'a lot is never deleted'); END""",
    """CREATE TABLE record_chain (
        seq INTEGER PRIMARY KEY CHECK (seq > 0),
        kind TEXT NOT NULL,
        key TEXT NOT NULL,
        content_sha256 TEXT NOT NULL CHECK (length(content_sha256) = 64),
        chain_sha256 TEXT NOT NULL CHECK (length(chain_sha256) = 64)
    )""",
    "CREATE INDEX record_chain_record ON record_chain(kind, key)",
    """CREATE TRIGGER record_chain_no_update BEFORE UPDATE ON record_chain
    BEGIN SELECT RAISE(ABORT, 'the record chain is never changed'); END""",
    """CREATE TRIGGER record_chain_no_delete BEFORE DELETE ON record_chain
    BEGIN SELECT RAISE(ABORT, 'the record chain is never changed'); END""",
    """CREATE TRIGGER record_chain_in_order BEFORE INSERT ON record_chain
    WHEN NEW.seq IS NOT (SELECT coalesce(max(seq), 0) + 1 FROM record_chain)
    BEGIN SELECT RAISE(ABORT, 'the record chain only grows at its end'); END""",
)


def _chain_stored_records(conn: sqlite3.Connection) -> None:
    chain.append_all(conn)


MIGRATIONS: tuple[Migration, ...] = (
    Migration(1, "lots, processors, sensitometers, calibrations, snapshots, processor QC", _V1),
    Migration(2, "notes on snapshots; index by processor", _V2),
    Migration(3, "QC entries: ids, repeat strips, corrections, no changes", _V3),
    Migration(4, "late QC entries, date corrections, settings history, frozen events and crossovers, hash chain",
              _V4, _chain_stored_records),
)

#: The first schema version with the hash chain.
CHAIN_VERSION = 4

LATEST_VERSION = MIGRATIONS[-1].version
