"""Snapshots: storing them, reading and listing them, trends, revisions, retirement and notes.

Part of :class:`stripscan.archive.service.Archive`, which adds the plumbing these rules use
(``_writing``, ``read_together``, ``_c``, ``_query``, ``_rows``, ``_chain``, ``_missing``, ``_checked``).
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from typing import Any

from stripscan.core.records import Analysis, ScanInfo, StripResult

from stripscan.archive.backend import Connection
from stripscan.archive.entry_checks import check_note, check_snapshot
from stripscan.archive.errors import (
    ArchiveConflictError,
    ArchiveError,
)
from stripscan.archive.records import (
    FIGURES,
    EmulsionLot,
    NewSnapshot,
    Processor,
    Sensitometer,
    Snapshot,
    SnapshotNote,
    SnapshotSummary,
    StepReadings,
    TrendPoint,
    snapshots_from_analysis,
)
from stripscan.archive.values import canonical_json, utc_now
from stripscan.archive.tables import (
    DAY,
    SNAPSHOT_COLUMNS,
    DATA_COLUMNS,
    SNAPSHOT_SELECT,
    insert_sql,
    STEP_COLUMNS,
    SUMMARY_SELECT,
    USABLE_STEP,
)


class SnapshotHistory:
    """Snapshots: storing them, reading and listing them, trends, revisions, retirement and notes. A part of :class:`~stripscan.archive.service.Archive`."""

    # ------------------------------------------------------------ snapshots

    def _next_id(self, conn: Connection, table: str) -> int:
        # Safe inside BEGIN IMMEDIATE: no other writer can take the number.
        return conn.execute(f"SELECT coalesce(max(id), 0) + 1 FROM {table}").fetchone()[0]

    def _check_links(self, conn: Connection, snapshot: Snapshot, create_missing: bool) -> None:
        if not self._exists("emulsion_lots", "lot_id", snapshot.lot_id):
            if not create_missing:
                raise self._missing("lot", snapshot.lot_id)
            self._insert_reference(conn, EmulsionLot(snapshot.lot_id))
        if snapshot.processor is not None and not self._exists("processors", "name", snapshot.processor):
            if not create_missing:
                raise self._missing("processor", snapshot.processor)
            self._insert_reference(conn, Processor(snapshot.processor))
        if snapshot.sensitometer is not None:
            self._require(Sensitometer, snapshot.sensitometer)
        if snapshot.calibration_hash is not None:
            if not self._exists("calibrations", "hash", snapshot.calibration_hash):
                raise self._missing("calibration", snapshot.calibration_hash)
        if snapshot.revises is not None:
            row = conn.execute("SELECT n.id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id "
                               "WHERE s.id = ?", (snapshot.revises,)).fetchone()
            if row is None:
                raise self._missing("snapshot", snapshot.revises)
            if row[0] is not None:
                raise ArchiveConflictError(f"{self.path}: snapshot {snapshot.revises} has already been "
                                           f"revised by snapshot {row[0]}; revise that one instead")

    def _insert_snapshot(self, conn: Connection, snapshot: Snapshot, *,
                         create_missing: bool = False) -> None:
        """Write one snapshot, its step table and figure columns (inside a transaction)."""
        check_snapshot(self.path, snapshot)
        self._check_links(conn, snapshot, create_missing)
        strip = snapshot.strip.to_dict()
        steps = strip["steps"]
        numbers = [s["step"] for s in steps]
        if len(set(numbers)) != len(numbers):
            raise ArchiveError(f"{self.path}: cannot store snapshot: strip {snapshot.strip.index} "
                               "lists the same step number twice")
        metrics = strip["metrics"]
        values = {
            "id": snapshot.id, "snapshot_id": snapshot.id, "created_at": snapshot.created_at, "lot_id": snapshot.lot_id,
            "processor": snapshot.processor, "sensitometer": snapshot.sensitometer,
            "calibration_hash": snapshot.calibration_hash, "operator": snapshot.operator,
            "exposed_on": snapshot.exposed_on, "processed_on": snapshot.processed_on,
            "scanned_on": snapshot.scanned_on, "scan_path": snapshot.scan.path,
            "scan_sha256": snapshot.scan.sha256, "scan_json": canonical_json(snapshot.scan.to_dict()),
            "strip_index": snapshot.strip.index, "strip_json": canonical_json(strip),
            **{name: metrics.get(name) for name in FIGURES},
            "settings_json": canonical_json(snapshot.settings),
            "warnings_json": canonical_json(list(snapshot.warnings)),
            "program_version": snapshot.program_version, "notes": snapshot.notes,
            "preview_png": snapshot.preview_png, "revises": snapshot.revises,
            "revision_reason": snapshot.revision_reason, "retired_at": snapshot.retired_at,
            "retired_reason": snapshot.retired_reason,
        }
        conn.execute(insert_sql("snapshots", SNAPSHOT_COLUMNS), tuple(values[c] for c in SNAPSHOT_COLUMNS))
        conn.execute(insert_sql("snapshot_data", DATA_COLUMNS), tuple(values[c] for c in DATA_COLUMNS))
        conn.executemany(
            insert_sql("snapshot_steps", STEP_COLUMNS),
            [(snapshot.id, s["step"], s["log_exposure"], s["od"], s["od_sd"], s["pixels"],
              int(s["in_range"]), int(s["excluded"])) for s in steps])
        self._chain(conn, "snapshot", snapshot.id)
        if snapshot.retired_at is not None:
            self._chain(conn, "retirement", snapshot.id)

    def _store_new(self, conn: Connection, draft: NewSnapshot, *, create_missing: bool,
                   revises: int | None = None, reason: str | None = None) -> int:
        if not isinstance(draft, NewSnapshot):
            raise TypeError(f"expected a NewSnapshot, not {type(draft).__name__}")
        digest = self._insert_calibration(conn, draft.calibration) if draft.calibration is not None else None
        snapshot_id = self._next_id(conn, "snapshots")
        snapshot = self._checked(
            "store snapshot", Snapshot,
            id=snapshot_id, created_at=utc_now(), lot_id=draft.lot_id, scan=draft.scan,
            strip=draft.strip, processor=draft.processor, sensitometer=draft.sensitometer,
            calibration_hash=digest, operator=draft.operator, exposed_on=draft.exposed_on,
            processed_on=draft.processed_on, scanned_on=draft.scanned_on, settings=draft.settings,
            warnings=draft.warnings, program_version=draft.program_version, notes=draft.notes,
            preview_png=draft.preview_png, revises=revises, revision_reason=reason)
        self._insert_snapshot(conn, snapshot, create_missing=create_missing)
        return snapshot_id

    def add_snapshot(self, draft: NewSnapshot, *, create_missing: bool = False) -> Snapshot:
        """Store one strip's reading and return it as stored.

        Parameters
        ----------
        draft : NewSnapshot
            The reading and its bookkeeping.
        create_missing : bool
            Add a bare lot or processor entry when the named one is not
            stored yet, instead of refusing.

        Raises
        ------
        ArchiveLookupError
            When the lot, processor or sensitometer is not stored.
        """
        return self.add_snapshots([draft], create_missing=create_missing)[0]

    def add_snapshots(self, drafts: Iterable[NewSnapshot], *, create_missing: bool = False,
                      new_sensitometer: Sensitometer | None = None) -> list[Snapshot]:
        """Store several readings in one transaction: all of them or none.

        ``new_sensitometer`` is stored first, in the same transaction, for
        readings that name a sensitometer the archive does not know yet.
        """
        with self._writing("add snapshots") as conn:
            if new_sensitometer is not None:
                self._insert_reference(conn, new_sensitometer)
            ids = [self._store_new(conn, draft, create_missing=create_missing) for draft in drafts]
            return [self._load_snapshot(i) for i in ids]

    def add_analysis(self, analysis: Analysis, lot_id: str, *, calibration: dict[str, Any] | None = None,
                     create_missing: bool = False, new_sensitometer: Sensitometer | None = None,
                     **details: Any) -> list[Snapshot]:
        """Store every strip of an analysed scan as one snapshot each, in one transaction.

        ``calibration`` is the full calibration used (see
        :func:`~stripscan.archive.records.snapshots_from_analysis`);
        ``new_sensitometer`` a sensitometer to store with them (see
        :meth:`add_snapshots`); ``details`` are :class:`NewSnapshot` fields
        such as ``processor``, ``sensitometer``, ``operator``,
        ``exposed_on``, ``processed_on`` or ``notes``.
        """
        try:
            drafts = snapshots_from_analysis(analysis, lot_id, calibration=calibration, **details)
        except (TypeError, ValueError) as exc:
            raise ArchiveError(f"{self.path}: cannot store {analysis.scan.path}: {exc}") from None
        return self.add_snapshots(drafts, create_missing=create_missing, new_sensitometer=new_sensitometer)

    def _snapshot_from_row(self, row: Sequence[Any]) -> Snapshot:
        data = dict(zip((*SNAPSHOT_COLUMNS, *DATA_COLUMNS), row))
        return Snapshot(
            id=data["id"], created_at=data["created_at"], lot_id=data["lot_id"],
            scan=ScanInfo.from_dict(json.loads(data["scan_json"])),
            strip=StripResult.from_dict(json.loads(data["strip_json"])),
            processor=data["processor"], sensitometer=data["sensitometer"],
            calibration_hash=data["calibration_hash"], operator=data["operator"],
            exposed_on=data["exposed_on"], processed_on=data["processed_on"],
            scanned_on=data["scanned_on"], settings=json.loads(data["settings_json"]),
            warnings=tuple(json.loads(data["warnings_json"])), program_version=data["program_version"],
            notes=data["notes"], preview_png=data["preview_png"], revises=data["revises"],
            revision_reason=data["revision_reason"], retired_at=data["retired_at"],
            retired_reason=data["retired_reason"])

    def _load_snapshot(self, snapshot_id: int) -> Snapshot:
        row = self._c.execute(f"{SNAPSHOT_SELECT} WHERE s.id = ?", (snapshot_id,)).fetchone()
        if row is None:
            raise self._missing("snapshot", snapshot_id)
        return self._snapshot_from_row(row)

    def get_snapshot(self, snapshot_id: int) -> Snapshot:
        """The snapshot with this id, retired or superseded ones included."""
        try:
            return self._load_snapshot(snapshot_id)
        except self._backend.Error as exc:
            raise self._translate(exc, "read it") from None

    def all_snapshots(self) -> list[Snapshot]:
        """Every stored snapshot in full, in id order (for export and audits)."""
        return [self._snapshot_from_row(row) for row in self._query(f"{SNAPSHOT_SELECT} ORDER BY s.id")]

    def list_snapshots(self, lot: str | None = None, processor: str | None = None, *,
                       include_retired: bool = False, include_superseded: bool = False) -> list[SnapshotSummary]:
        """Snapshot summaries in film-date order.

        By default only current snapshots: the latest revision of each
        chain, and not retired.

        Parameters
        ----------
        lot, processor : str, optional
            Keep only this lot's / this processor's snapshots.
        include_retired : bool
            Also list retired snapshots.
        include_superseded : bool
            Also list snapshots that a later revision corrects.
        """
        where, params = self._filters(lot=[lot] if lot is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=include_superseded)
        rows = self._query(f"{SUMMARY_SELECT}{where} ORDER BY day, s.id", params)
        return [SnapshotSummary.from_row(row) for row in rows]

    @staticmethod
    def _filters(*, lot: Sequence[str] | None, processor: str | None, include_retired: bool,
                 include_superseded: bool) -> tuple[str, list[Any]]:
        clauses: list[str] = []
        params: list[Any] = []
        if lot is not None:
            clauses.append(f"s.lot_id IN ({', '.join('?' for _ in lot)})")
            params.extend(lot)
        if processor is not None:
            clauses.append("s.processor = ?")
            params.append(processor)
        if not include_retired:
            clauses.append("s.retired_at IS NULL")
        if not include_superseded:
            clauses.append("n.id IS NULL")
        return (" WHERE " + " AND ".join(clauses) if clauses else ""), params

    def trend(self, figure: str, lots: Sequence[str] | str | None = None, *, processor: str | None = None,
              include_retired: bool = False) -> list[TrendPoint]:
        """A figure over time: ``(date, value, lot, snapshot_id)`` of current snapshots.

        Snapshots where the figure could not be read are left out.
        Mid-density and density difference are read at the same steps in
        every strip of a lot, those of :meth:`lot_qc_steps` (common practice:
        once picked, the QC steps are kept); a strip on its own picks the step
        closest to the target, and neighbouring strips can pick neighbouring
        steps, a jump of several tenths that is no change of the film.

        Parameters
        ----------
        figure : str
            One of :data:`~stripscan.archive.records.FIGURES`.
        lots : sequence of str, optional
            Lots to include (all when omitted).
        processor : str, optional
            Keep only this processor's snapshots.
        """
        if figure not in FIGURES:
            raise ArchiveError(f"unknown figure {figure!r}; choose one of {', '.join(FIGURES)}")
        if isinstance(lots, str):
            lots = [lots]
        if figure in ("mid_density", "density_difference"):
            return self._trend_at_fixed_steps(figure, lots, processor=processor, include_retired=include_retired)
        where, params = self._filters(lot=list(lots) if lots is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=False)
        where += (" AND " if where else " WHERE ") + f"s.{figure} IS NOT NULL"
        rows = self._query(
            f"SELECT {DAY} AS day, s.{figure}, s.lot_id, s.id FROM snapshots s "
            f"LEFT JOIN snapshots n ON n.revises = s.id{where} ORDER BY day, s.id", params)
        return [TrendPoint(*row) for row in rows]

    def lot_qc_steps(self, lot: str) -> tuple[int, int, int] | None:
        """The steps a lot's mid-density and density difference are read at.

        Returns
        -------
        (mid_density_step, dd_high_step, dd_low_step) or None
            The steps the lot's first current snapshot (by date, then number)
            chose for itself; None when no snapshot of the lot has all three.
        """
        metrics = "json_extract(d.strip_json, '$.metrics.{}')"
        picked = [metrics.format(name) for name in ("mid_density_step", "dd_high_step", "dd_low_step")]
        columns = ", ".join(picked)
        current = "WHERE s.lot_id = ? AND s.retired_at IS NULL AND n.id IS NULL"
        first = f"ORDER BY {DAY}, s.id LIMIT 1"
        # Nearly always the lot's first strip has its steps: read that one strip's JSON first,
        # as testing the JSON of every strip of the lot costs a server a parse of each (a
        # second for a lot of thousands); only when it lacks them, the first strip that has them.
        rows = self._query(f"SELECT {columns} FROM snapshot_data d WHERE d.snapshot_id = (SELECT s.id "
                           f"FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id {current} {first})", (lot,))
        if rows and any(step is None for step in rows[0]):
            has_all = "".join(f" AND {p} IS NOT NULL" for p in picked)
            rows = self._query(f"SELECT {columns} FROM snapshots s JOIN snapshot_data d ON d.snapshot_id = s.id "
                               f"LEFT JOIN snapshots n ON n.revises = s.id {current}{has_all} {first}", (lot,))
        return tuple(int(step) for step in rows[0]) if rows else None  # type: ignore[return-value]

    def step_readings(self, lot: str | None = None, processor: str | None = None, *, at_lot_steps: bool = True,
                      include_retired: bool = False, include_superseded: bool = False) -> dict[int, StepReadings]:
        """Mid-density and density difference of each listed snapshot, with the steps read, by snapshot id.

        Parameters
        ----------
        lot, processor : str, optional
            As :meth:`list_snapshots`, which lists the same snapshots.
        at_lot_steps : bool
            True: read every strip of a lot at the lot's kept steps
            (:meth:`lot_qc_steps`, as :meth:`trend` does), so that a lot's
            strips compare; False: each strip at the steps it chose itself.
        include_retired, include_superseded : bool
            As :meth:`list_snapshots`.
        """
        where, params = self._filters(lot=[lot] if lot is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=include_superseded)
        if not at_lot_steps:
            own = "json_extract(d.strip_json, '$.metrics.{}')"
            rows = self._query(
                f"SELECT s.id, {own.format('mid_density_step')}, s.mid_density, {own.format('dd_high_step')}, "
                f"{own.format('dd_low_step')}, s.density_difference FROM snapshots s "
                f"JOIN snapshot_data d ON d.snapshot_id = s.id LEFT JOIN snapshots n ON n.revises = s.id{where}",
                params)
            return {row[0]: StepReadings(*row[1:]) for row in rows}
        out: dict[int, StepReadings] = {}
        lots = [row[0] for row in self._query(
            f"SELECT DISTINCT s.lot_id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id{where}", params)]
        for name in lots:
            steps = self.lot_qc_steps(name)
            lot_where = where + (" AND " if where else " WHERE ") + "s.lot_id = ?"
            if steps is None:
                rows = self._query(f"SELECT s.id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id"
                                   f"{lot_where}", [*params, name])
                out.update({row[0]: StepReadings(None, None, None, None, None) for row in rows})
                continue
            joins = " ".join(f"LEFT JOIN snapshot_steps {t} ON {USABLE_STEP.format(t)}" for t in "abc")
            rows = self._query(f"SELECT s.id, a.od, b.od, c.od FROM snapshots s {joins} "
                               f"LEFT JOIN snapshots n ON n.revises = s.id{lot_where}", [*steps, *params, name])
            for sid, mid, high, low in rows:
                dd = high - low if high is not None and low is not None else None
                out[sid] = StepReadings(steps[0], mid, steps[1], steps[2], dd)
        return out

    def _trend_at_fixed_steps(self, figure: str, lots: Sequence[str] | None, *, processor: str | None,
                              include_retired: bool) -> list[TrendPoint]:
        if lots is None:
            lots = [row[0] for row in self._query("SELECT DISTINCT lot_id FROM snapshots ORDER BY lot_id")]
        usable = USABLE_STEP
        points: list[TrendPoint] = []
        for lot in lots:
            steps = self.lot_qc_steps(lot)
            if steps is None:
                continue
            where, params = self._filters(lot=[lot], processor=processor, include_retired=include_retired,
                                          include_superseded=False)
            if figure == "mid_density":
                value, joins, step_params = "a.od", f"JOIN snapshot_steps a ON {usable.format('a')}", [steps[0]]
            else:
                value = "a.od - b.od"
                joins = f"JOIN snapshot_steps a ON {usable.format('a')} JOIN snapshot_steps b ON {usable.format('b')}"
                step_params = [steps[1], steps[2]]
            rows = self._query(
                f"SELECT {DAY} AS day, {value}, s.lot_id, s.id FROM snapshots s {joins} "
                f"LEFT JOIN snapshots n ON n.revises = s.id{where}", [*step_params, *params])
            points += [TrendPoint(*row) for row in rows]
        return sorted(points, key=lambda p: (p.date, p.snapshot_id))

    def step_table(self, snapshot_id: int) -> list[tuple[int, float, float | None, float | None, bool, bool]]:
        """``(step, log_exposure, od, od_sd, in_range, excluded)`` rows of a snapshot, by step."""
        if not self._query("SELECT 1 FROM snapshots WHERE id = ?", (snapshot_id,)):
            raise self._missing("snapshot", snapshot_id)
        rows = self._query("SELECT step, log_exposure, od, od_sd, in_range, excluded FROM snapshot_steps "
                           "WHERE snapshot_id = ? ORDER BY step", (snapshot_id,))
        return [(s, e, od, sd, bool(r), bool(x)) for s, e, od, sd, r, x in rows]

    # ------------------------------------------------- revisions, retirement

    def _require_latest(self, conn: Connection, snapshot_id: int, doing: str) -> None:
        """Refuse to ``doing`` a snapshot that is retired or already corrected by a revision."""
        row = conn.execute("SELECT n.id, s.retired_at, s.retired_reason FROM snapshots s "
                           "LEFT JOIN snapshots n ON n.revises = s.id WHERE s.id = ?", (snapshot_id,)).fetchone()
        if row is None:
            raise self._missing("snapshot", snapshot_id)
        superseded_by, retired_at, retired_reason = row
        if retired_at is not None:
            raise ArchiveConflictError(f"{self.path}: snapshot {snapshot_id} was retired on {retired_at} "
                                       f"({retired_reason}); a retired snapshot cannot be {doing}")
        if superseded_by is not None:
            raise ArchiveConflictError(f"{self.path}: snapshot {snapshot_id} has already been revised by "
                                       f"snapshot {superseded_by}; only the latest revision can be {doing}")

    def _reason(self, reason: str, doing: str) -> str:
        if not isinstance(reason, str) or not reason.strip():
            raise ArchiveError(f"{self.path}: a snapshot is {doing} only with a reason")
        return reason.strip()

    def revise(self, snapshot_id: int, new_record: NewSnapshot, reason: str, *,
               new_sensitometer: Sensitometer | None = None) -> Snapshot:
        """Correct a snapshot by storing ``new_record`` as its revision.

        The old snapshot stays as it was and readable; listings and trends
        show the revision in its place.  Only the latest revision of a chain
        can be revised, and a retired snapshot cannot be.

        Raises
        ------
        ArchiveError
            When ``reason`` is empty.
        ArchiveConflictError
            When the snapshot is retired or has already been revised.
        """
        reason = self._reason(reason, "revised")
        with self._writing(f"revise snapshot {snapshot_id}") as conn:
            self._require_latest(conn, snapshot_id, "revised")
            if new_sensitometer is not None:
                self._insert_reference(conn, new_sensitometer)
            new_id = self._store_new(conn, new_record, create_missing=False, revises=snapshot_id, reason=reason)
            return self._load_snapshot(new_id)

    def retire(self, snapshot_id: int, reason: str) -> Snapshot:
        """Withdraw a snapshot from listings and trends, keeping it readable.

        A snapshot is retired once.  To withdraw a corrected reading, retire
        the latest revision of its chain.
        """
        reason = self._reason(reason, "retired")
        with self._writing(f"retire snapshot {snapshot_id}") as conn:
            self._require_latest(conn, snapshot_id, "retired")
            conn.execute("UPDATE snapshots SET retired_at = ?, retired_reason = ? WHERE id = ?",
                         (utc_now(), reason, snapshot_id))
            self._chain(conn, "retirement", snapshot_id)
            return self._load_snapshot(snapshot_id)

    def history(self, snapshot_id: int) -> list[Snapshot]:
        """The whole revision chain ``snapshot_id`` belongs to, oldest first."""
        with self.read_together():
            rows = self._query(
                "WITH RECURSIVE up(id, revises) AS ("
                "  SELECT id, revises FROM snapshots WHERE id = ?"
                "  UNION ALL SELECT s.id, s.revises FROM snapshots s JOIN up ON s.id = up.revises),"
                " down(id) AS ("
                "  SELECT id FROM up WHERE revises IS NULL"
                "  UNION ALL SELECT s.id FROM snapshots s JOIN down ON s.revises = down.id)"
                " SELECT id FROM down ORDER BY id", (snapshot_id,))
            if not rows:
                raise self._missing("snapshot", snapshot_id)
            return [self.get_snapshot(row[0]) for row in rows]

    # ------------------------------------------------------------ notes

    def add_note(self, snapshot_id: int, text: str, author: str = "") -> SnapshotNote:
        """Attach a remark to a snapshot without changing it."""
        with self._writing(f"add a note to snapshot {snapshot_id}") as conn:
            if not self._exists("snapshots", "id", snapshot_id):
                raise self._missing("snapshot", snapshot_id)
            note = self._checked("add note", SnapshotNote, self._next_id(conn, "snapshot_notes"), snapshot_id,
                                 utc_now(), text, author)
            check_note(self.path, note)
            self._insert_note(conn, note)
            return note

    def _insert_note(self, conn: Connection, note: SnapshotNote) -> None:
        conn.execute("INSERT INTO snapshot_notes (id, snapshot_id, created_at, author, text) VALUES (?, ?, ?, ?, ?)",
                     (note.id, note.snapshot_id, note.created_at, note.author, note.text))
        self._chain(conn, "note", note.id)

    def list_notes(self, snapshot_id: int | None = None) -> list[SnapshotNote]:
        """Notes of one snapshot (or all notes), oldest first."""
        sql = "SELECT id, snapshot_id, created_at, text, author FROM snapshot_notes"
        params: tuple[Any, ...] = ()
        if snapshot_id is not None:
            sql, params = sql + " WHERE snapshot_id = ?", (snapshot_id,)
        return [SnapshotNote(*row) for row in self._query(sql + " ORDER BY id", params)]
