"""The lot archive page without Qt: which lot and snapshot are chosen, what the tables show, what is read.

:class:`ArchivePage` holds the page's state and decides what to read next;
the reading itself is done by the plain functions of this module, which a
worker thread runs (each opens the archive read-only for one look and
keeps no connection, so a command line run writing to the same file is
seen on the next refresh, and a slow or locked archive never freezes the
window).  :class:`~stripscan.gui.panels.archive_panel.ArchivePanel`
subscribes to :attr:`ArchivePage.events` and writes back through the
setters.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

from stripscan.archive import Archive, LotSummary, QcEvent, Snapshot, SnapshotNote, SnapshotSummary, StepReadings, TrendPoint
from stripscan.archive.records import snapshot_status
from stripscan.gui.models.events import Event
from stripscan.gui.models.location import ArchiveLocation, as_location, connection_lost, location_exists, location_words
from stripscan.gui.models.work import Run, run_now

__all__ = ["ArchivePage", "ArchivePageEvents", "SnapshotRecord", "SnapshotListing", "SnapshotRow", "TrendData",
           "check_archive", "read_lots", "read_listing", "read_snapshot", "read_trend", "provenance_rows", "history_rows",
           "SUMMARY_COLUMNS", "STEP_READING_COLUMNS", "SNAPSHOT_COLUMNS"]

# (title, SnapshotSummary field, digits) of the snapshot list.
SUMMARY_COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("Base+fog", "base_fog", 3), ("Speed", "speed_log_exposure", 3),
    ("Avg. grad.", "average_gradient", 2),
)
#: Mid-density and density difference go with the steps they were read at (Archive.step_readings).
STEP_READING_COLUMNS = ("Mid-dens.", "MD step", "Dens. diff.", "DD steps")
#: The snapshot list's columns, left to right.
SNAPSHOT_COLUMNS = ("No.", "Date", "Strip", "Operator", *(t for t, _, _ in SUMMARY_COLUMNS), *STEP_READING_COLUMNS,
                    "Status")


@dataclass(frozen=True)
class SnapshotRecord:
    """One snapshot with what an audit asks next to it.

    Attributes
    ----------
    snapshot : Snapshot
    history : list of Snapshot
        The whole revision chain, oldest first (just the snapshot when never revised).
    notes : list of SnapshotNote
        Remarks added after storing.
    calibration : dict or None
        The stored calibration the snapshot names.
    """

    snapshot: Snapshot
    history: list[Snapshot]
    notes: list[SnapshotNote]
    calibration: dict[str, Any] | None

    @property
    def superseded_by(self) -> int | None:
        """Id of the revision that corrects this snapshot, or None."""
        return next((s.id for s in self.history if s.revises == self.snapshot.id), None)


@dataclass(frozen=True)
class SnapshotListing:
    """A lot's snapshots as listed, with the mid-density and density difference of each (by snapshot id)."""

    snapshots: tuple[SnapshotSummary, ...] = ()
    readings: dict[int, StepReadings] = field(default_factory=dict)


@dataclass(frozen=True)
class SnapshotRow:
    """One line of the snapshot list: its cells as (text, value behind it or None, right-aligned)."""

    snapshot_id: int
    cells: tuple[tuple[str, Any, bool], ...]
    current: bool


@dataclass(frozen=True)
class TrendData:
    """What the trend view draws: the points, each lot's kept QC steps and the processor events."""

    points: tuple[TrendPoint, ...] = ()
    steps: dict[str, tuple[int, int, int] | None] = field(default_factory=dict)
    events: tuple[QcEvent, ...] = ()


# -- reading (run in a worker thread) ------------------------------------------------------


def check_archive(path: str | os.PathLike[str], *, create: bool, progress: Any = None) -> str | os.PathLike[str]:
    """Open (or make, ``create``) the archive at ``path`` (a file or a server) once, so that a bad file or an
    unreachable server is named before any page shows it."""
    Archive.open(path, read_only=not create, create=create).close()
    return path


def read_lots(path: str | os.PathLike[str], *, progress: Any = None) -> list[LotSummary]:
    """The archive's lots with their counts and dates."""
    with Archive.open(path, read_only=True) as archive:
        return archive.list_lots()


def read_listing(path: str | os.PathLike[str], lot: str, *, every: bool, own_steps: bool,
                 progress: Any = None) -> SnapshotListing:
    """A lot's snapshots (``every``: also revised and retired ones) and their step readings.

    ``own_steps`` reads mid-density and density difference at each strip's
    own steps; otherwise at the lot's kept steps, as the trends are.
    """
    with Archive.open(path, read_only=True) as archive:
        snapshots = archive.list_snapshots(lot, include_retired=every, include_superseded=every)
        readings = archive.step_readings(lot, at_lot_steps=not own_steps, include_retired=every,
                                         include_superseded=every)
    return SnapshotListing(tuple(snapshots), dict(readings))


def read_snapshot(path: str | os.PathLike[str], snapshot_id: int, *, progress: Any = None) -> SnapshotRecord:
    """Read a snapshot, its revision chain, notes and calibration in one look at the archive."""
    with Archive.open(path, read_only=True) as archive:
        snapshot = archive.get_snapshot(snapshot_id)
        digest = snapshot.calibration_hash
        return SnapshotRecord(snapshot, archive.history(snapshot_id), archive.list_notes(snapshot_id),
                              archive.get_calibration(digest) if digest else None)


def read_trend(path: str | os.PathLike[str], figure: str, lots: list[str], *, progress: Any = None) -> TrendData:
    """The trend of ``figure`` for ``lots``, the lots' kept QC steps (for the two QC figures) and the events."""
    with Archive.open(path, read_only=True) as archive:
        points = archive.trend(figure, lots)
        steps = {lot: archive.lot_qc_steps(lot) for lot in lots} \
            if figure in ("mid_density", "density_difference") else {}
        # Processor events (chemistry changes, service) explain steps in a trend.
        events = archive.list_qc_events() if points else []
    return TrendData(tuple(points), steps, tuple(events))


# -- what the tables show --------------------------------------------------------------------


def _or_dash(value: object) -> str:
    return "—" if value in (None, "") else str(value)


def _number(value: float | None, digits: int) -> str:
    return "—" if value is None else f"{value:.{digits}f}"


def provenance_rows(record: SnapshotRecord) -> list[tuple[str, str]]:
    """(what, value) lines saying where a snapshot came from, for the audit trail."""
    s, scan, cal = record.snapshot, record.snapshot.scan, record.calibration
    dpi = f"{scan.dpi:g} dpi" if scan.dpi else "resolution unknown"
    rows = [
        ("Snapshot", str(s.id)), ("Status", snapshot_status(s, record.superseded_by)),
        ("Emulsion lot", s.lot_id), ("Processor", _or_dash(s.processor)),
        ("Sensitometer", _or_dash(s.sensitometer)), ("Operator", _or_dash(s.operator)),
        ("Exposed on", _or_dash(s.exposed_on)), ("Processed on", _or_dash(s.processed_on)),
        ("Scanned on", _or_dash(s.scanned_on)), ("Stored (UTC)", s.created_at),
        ("Program version", f"stripscan {s.program_version}" if s.program_version else "—"),
        ("Scan file", scan.path), ("Scan sha256", scan.sha256),
        ("Scan", f"{scan.width} × {scan.height} px, {dpi}, {scan.bits}-bit, {scan.channel}, {scan.decoding}"),
        ("Strip on the scan", str(s.strip.index)),
    ]
    if cal is not None and cal.get("mode") == "direct":
        rows.append(("Calibration", "none: direct mode, densities uncalibrated"))
    else:
        rows.append(("Calibration sha256", _or_dash(s.calibration_hash)))
    if cal is not None and cal.get("mode") != "direct":
        rows += [("Calibration made", _or_dash(cal.get("created"))),
                 ("Calibration tablet scan sha256", _or_dash(cal.get("scan_sha256")))]
    if s.revises is not None:
        rows.append(("Corrects snapshot", f"{s.revises}: {s.revision_reason}"))
    if s.notes:
        rows.append(("Notes", s.notes))
    if s.strip.warnings:
        rows.append(("Warnings of this strip", "; ".join(s.strip.warnings)))
    return rows


def history_rows(record: SnapshotRecord | None) -> list[tuple[int, str, str, str]]:
    """(id, stored at, change, status) of each version in the revision chain, oldest first."""
    chain = record.history if record is not None else []
    later = {s.revises: s.id for s in chain if s.revises is not None}
    return [(s.id, s.created_at, f"corrects {s.revises}: {s.revision_reason}" if s.revises is not None
             else "first reading", snapshot_status(s, later.get(s.id))) for s in chain]


def record_title(record: SnapshotRecord | None) -> str:
    """The snapshot view's heading."""
    if record is None:
        return "No snapshot open. Choose one from the list and press Open, or click a trend point."
    s = record.snapshot
    return f"Snapshot {s.id}: lot {s.lot_id}, strip {s.strip.index}, {s.date} ({snapshot_status(s, record.superseded_by)})"


def snapshot_row(s: SnapshotSummary, readings: StepReadings | None) -> SnapshotRow:
    """One line of the snapshot list (:data:`SNAPSHOT_COLUMNS`)."""
    qc = readings or StepReadings(None, None, None, None, None)
    dd_steps = f"{qc.dd_high_step}−{qc.dd_low_step}" if qc.dd_high_step is not None else "—"
    cells: list[tuple[str, Any, bool]] = [(str(s.id), s.id, True), (s.date, None, False),
                                          (str(s.strip_index), None, True), (_or_dash(s.operator), None, False)]
    cells += [(_number(getattr(s, name), digits), getattr(s, name), True) for _, name, digits in SUMMARY_COLUMNS]
    cells += [(_number(qc.mid_density, 3), qc.mid_density, True), (_or_dash(qc.mid_step), qc.mid_step, True),
              (_number(qc.density_difference, 3), qc.density_difference, True), (dd_steps, None, True),
              (snapshot_status(s), None, False)]
    return SnapshotRow(s.id, tuple(cells), s.current)


# -- the page -------------------------------------------------------------------------------


class ArchivePageEvents:
    """The events an :class:`ArchivePage` emits.

    Attributes
    ----------
    lots_changed : Event
        The lot list was read again; no arguments.
    snapshots_changed : Event
        The chosen lot's snapshot list was read again; no arguments.
    record_changed : Event
        The open snapshot changed (or closed); ``(quiet)``: True when only read again.
    failed : Event
        Something could not be read; ``(title, error)``.
    """

    def __init__(self) -> None:
        self.lots_changed = Event("lots_changed")
        self.snapshots_changed = Event("snapshots_changed")
        self.record_changed = Event("record_changed")
        self.failed = Event("failed")


class ArchivePage:
    """Lots, the chosen lot's snapshots and the open snapshot, over one archive file.

    Parameters
    ----------
    path : path-like or str, optional
        The archive: a file (a missing file is an empty page; the first
        stored snapshot makes it) or a server's connection string
        (:mod:`stripscan.gui.models.location`).
    run : Run
        Runs the reading (the page's worker threads; default: at once).

    Attributes
    ----------
    lots : list of LotSummary
    lot : str or None
        The chosen lot.
    show_all, own_steps : bool
        List revised and retired snapshots too; read each strip at its own steps.
    listing : SnapshotListing
        The chosen lot's snapshots.
    record : SnapshotRecord or None
        The open snapshot.
    """

    def __init__(self, path: str | os.PathLike[str] | None = None, *, run: Run = run_now) -> None:
        self.run = run
        self.events = ArchivePageEvents()
        self.path: ArchiveLocation | None = as_location(path)
        self.lots: list[LotSummary] = []
        self.lot: str | None = None
        self.show_all = False
        self.own_steps = False
        self.listing = SnapshotListing()
        self.record: SnapshotRecord | None = None

    @property
    def readable(self) -> bool:
        """Whether there is an archive to read (a file that exists, or a server)."""
        return location_exists(self.path)

    @property
    def snapshots(self) -> tuple[SnapshotSummary, ...]:
        return self.listing.snapshots

    def where_text(self) -> str:
        """Which archive the page shows, in words."""
        if self.path is None:
            return "No archive chosen."
        if not self.readable:
            return f"No archive yet at {self.path}; it is made when the first snapshot is saved."
        return f"Archive: {location_words(self.path)}"

    def set_archive(self, path: str | os.PathLike[str] | None) -> None:
        """Show another archive (no snapshot open)."""
        self.path = as_location(path)
        self.record = None
        self.events.record_changed.emit(True)
        self.refresh()

    def refresh(self) -> None:
        """Read the lots again, keeping the chosen lot and the open snapshot."""
        if not self.readable:
            self._lots_read([])
            return
        self.run(read_lots, self.path, key="archive-lots", on_done=self._lots_read,
                 on_error=lambda exc: self._lots_failed(exc))

    def _lots_failed(self, error: BaseException) -> None:
        # A lost connection keeps what the page shows (the window says so and offers to try again).
        if not connection_lost(error):
            self._lots_read([])
        self.events.failed.emit("The archive could not be read", error)

    def _lots_read(self, lots: list[LotSummary]) -> None:
        self.lots = list(lots)
        ids = [s.lot.lot_id for s in self.lots]
        self.lot = self.lot if self.lot in ids else (ids[0] if ids else None)
        self.events.lots_changed.emit()
        self._read_listing()
        if self.record is not None:
            self.open_snapshot(self.record.snapshot.id, quiet=True)

    def select_lot(self, lot: str | None) -> None:
        """Choose a lot by id (None: none) and list its snapshots."""
        self.lot = lot
        self._read_listing()

    def set_show_all(self, every: bool) -> None:
        self.show_all = bool(every)
        self._read_listing()

    def set_own_steps(self, own: bool) -> None:
        self.own_steps = bool(own)
        self._read_listing()

    def _read_listing(self) -> None:
        lot = self.lot
        if lot is None or not self.readable:
            self._listing_read(SnapshotListing())
            return

        def failed(exc: BaseException) -> None:
            if not connection_lost(exc):
                self._listing_read(SnapshotListing())
            self.events.failed.emit(f"The snapshots of lot {lot} could not be read", exc)

        self.run(read_listing, self.path, lot, every=self.show_all, own_steps=self.own_steps, key="archive-snapshots",
                 on_done=self._listing_read, on_error=failed)

    def _listing_read(self, listing: SnapshotListing) -> None:
        self.listing = listing
        self.events.snapshots_changed.emit()

    def snapshot_rows(self) -> list[SnapshotRow]:
        """The snapshot list's lines, oldest first."""
        return [snapshot_row(s, self.listing.readings.get(s.id)) for s in self.listing.snapshots]

    def listing_title(self) -> str:
        return f"Snapshots of lot {self.lot} ({len(self.listing.snapshots)})" if self.lot else "Snapshots"

    def open_snapshot(self, snapshot_id: int, *, quiet: bool = False) -> bool:
        """Read snapshot ``snapshot_id`` and show it; False when there is no archive to read.

        ``quiet``: read again only (after a refresh); a failure closes the
        view without a message.
        """
        if self.path is None:
            return False

        def failed(exc: BaseException) -> None:
            if connection_lost(exc):
                self.events.failed.emit(f"Snapshot {snapshot_id} could not be opened", exc)
                return
            self.record = None
            self.events.record_changed.emit(True)
            if not quiet:
                self.events.failed.emit(f"Snapshot {snapshot_id} could not be opened", exc)

        def read(record: SnapshotRecord) -> None:
            self.record = record
            self.events.record_changed.emit(quiet)

        self.run(read_snapshot, self.path, snapshot_id, key="archive-record", on_done=read, on_error=failed)
        return True
