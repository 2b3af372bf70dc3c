"""Film types, emulsion lots, processors, sensitometers and calibrations: the records snapshots refer to.

Part of :class:`stripscan.archive.service.Archive`, which adds the plumbing these rules use
(``_writing``, ``read_together``, ``_c``, ``_query``, ``_rows``, ``_chain``, ``_missing``, ``_checked``).
"""

from __future__ import annotations

import json
from typing import Any


from stripscan.archive.backend import Connection, Row
from stripscan.archive.entry_checks import check_reference
from stripscan.archive.errors import (
    ArchiveConflictError,
    ArchiveError,
)
from stripscan.archive.records import EmulsionLot, FilmType, LotSummary, Processor, Sensitometer
from stripscan.archive.values import calibration_hash, calibration_text, canonical_json
from stripscan.archive.tables import (
    DAY,
    REFERENCE,
    CHAIN_KIND,
)


class ReferenceData:
    """Film types, emulsion lots, processors, sensitometers and calibrations: the records snapshots refer to. A part of :class:`~stripscan.archive.service.Archive`."""

    # ------------------------------------------------------- reference data

    @staticmethod
    def _reference_row(record: Any) -> dict[str, Any]:
        row = record.to_dict()
        if isinstance(record, Sensitometer):
            row["log_exposures_json"] = canonical_json(row.pop("log_exposures"))
        return row

    @staticmethod
    def _reference_record(record_class: type, row: Row) -> Any:
        data = dict(row)
        if record_class is Sensitometer:
            data["log_exposures"] = tuple(json.loads(data.pop("log_exposures_json")))
        return record_class(**data)

    def _insert_reference(self, conn: Connection, record: Any) -> None:
        table, column, word = REFERENCE[type(record)]
        key = getattr(record, column)
        check_reference(self.path, record)
        if self._exists(table, column, key):
            raise ArchiveConflictError(f"{self.path}: {word} {key!r} is already in the archive")
        if isinstance(record, EmulsionLot) and record.film_type is not None:
            self._require(FilmType, record.film_type)
        row = self._reference_row(record)
        conn.execute(f"INSERT INTO {table} ({', '.join(row)}) VALUES ({', '.join('?' for _ in row)})",
                     tuple(row.values()))
        self._chain(conn, CHAIN_KIND[type(record)], key)

    def _add_reference(self, record: Any) -> Any:
        _, column, word = REFERENCE[type(record)]
        with self._writing(f"add {word} {getattr(record, column)!r}") as conn:
            self._insert_reference(conn, record)
        return record

    def _get_reference(self, record_class: type, key: str) -> Any:
        table, column, word = REFERENCE[record_class]
        rows = self._rows(f"SELECT * FROM {table} WHERE {column} = ?", (key,))
        if not rows:
            raise self._missing(word, key)
        return self._reference_record(record_class, rows[0])

    def _list_reference(self, record_class: type) -> list[Any]:
        table, column, _ = REFERENCE[record_class]
        return [self._reference_record(record_class, row)
                for row in self._rows(f"SELECT * FROM {table} ORDER BY {column}")]

    def add_film_type(self, film_type: FilmType) -> FilmType:
        """Store a film type; its name must be new."""
        return self._add_reference(film_type)

    def add_lot(self, lot: EmulsionLot) -> EmulsionLot:
        """Store an emulsion lot; its id must be new and its film type stored."""
        return self._add_reference(lot)

    def add_processor(self, processor: Processor) -> Processor:
        """Store a processor; its name must be new."""
        return self._add_reference(processor)

    def add_sensitometer(self, sensitometer: Sensitometer) -> Sensitometer:
        """Store a sensitometer with its step log-exposure table; its id must be new."""
        return self._add_reference(sensitometer)

    def get_film_type(self, name: str) -> FilmType:
        return self._get_reference(FilmType, name)

    def get_lot(self, lot_id: str) -> EmulsionLot:
        return self._get_reference(EmulsionLot, lot_id)

    def get_processor(self, name: str) -> Processor:
        return self._get_reference(Processor, name)

    def get_sensitometer(self, sensitometer_id: str) -> Sensitometer:
        return self._get_reference(Sensitometer, sensitometer_id)

    def list_film_types(self) -> list[FilmType]:
        return self._list_reference(FilmType)

    def list_processors(self) -> list[Processor]:
        return self._list_reference(Processor)

    def list_sensitometers(self) -> list[Sensitometer]:
        return self._list_reference(Sensitometer)

    def update_lot(self, lot_id: str, *, film_type: str | None = None, expiry_date: str | None = None,
                   received_date: str | None = None, notes: str | None = None,
                   create_missing: bool = False) -> EmulsionLot:
        """Fill in or change a lot's details; what is not given (None) stays as stored.

        Parameters
        ----------
        lot_id : str
            The lot (its id never changes).
        film_type : str, optional
            The kind of film; must be stored (see :meth:`add_film_type`)
            unless ``create_missing``.
        expiry_date, received_date : str, optional
            ``YYYY-MM-DD``: the expiry date printed on the box, the day the
            box arrived.
        notes : str, optional
            Free text.
        create_missing : bool
            Add the lot, and a bare film type, when not stored yet.

        Returns
        -------
        EmulsionLot
            The lot as stored now.  Each change is a new record of the hash chain.
        """
        with self._writing(f"store the details of lot {lot_id!r}") as conn:
            exists = self._exists("emulsion_lots", "lot_id", lot_id)
            if not exists and not create_missing:
                raise self._missing("lot", lot_id)
            old = self._get_reference(EmulsionLot, lot_id) if exists else EmulsionLot(lot_id)
            given = {"film_type": film_type, "expiry_date": expiry_date, "received_date": received_date,
                     "notes": notes}
            new = self._checked(f"store the details of lot {lot_id!r}", EmulsionLot,
                                **{**old.to_dict(), **{k: v for k, v in given.items() if v is not None}})
            if new.film_type is not None and not self._exists("film_types", "name", new.film_type):
                if not create_missing:
                    raise self._missing("film type", new.film_type)
                self._insert_reference(conn, FilmType(new.film_type))
            if not exists:
                self._insert_reference(conn, new)
            elif new != old:
                conn.execute("UPDATE emulsion_lots SET film_type = ?, expiry_date = ?, received_date = ?, notes = ? "
                             "WHERE lot_id = ?", (new.film_type, new.expiry_date, new.received_date, new.notes,
                                                  lot_id))
                self._chain(conn, "lot", lot_id)
            return new

    def list_lots(self) -> list[LotSummary]:
        """Every lot with the count and first/last film date of its current snapshots."""
        rows = self._rows(
            f"SELECT l.*, count(c.id) AS n, min(c.day) AS first, max(c.day) AS last "
            f"FROM emulsion_lots l LEFT JOIN ("
            f"  SELECT s.id, s.lot_id, {DAY} AS day FROM snapshots s"
            f"  WHERE s.retired_at IS NULL"
            f"  AND NOT EXISTS (SELECT 1 FROM snapshots n WHERE n.revises = s.id)"
            f") c ON c.lot_id = l.lot_id GROUP BY l.lot_id ORDER BY l.lot_id")
        lot_fields = ("lot_id", "film_type", "expiry_date", "received_date", "notes")
        return [LotSummary(EmulsionLot(**{k: row[k] for k in lot_fields}), row["n"], row["first"], row["last"])
                for row in rows]

    # --------------------------------------------------------- calibrations

    def _insert_calibration(self, conn: Connection, calibration: dict[str, Any]) -> str:
        digest = calibration_hash(calibration)
        if not self._exists("calibrations", "hash", digest):
            conn.execute("INSERT INTO calibrations (hash, json) VALUES (?, ?)",
                         (digest, calibration_text(calibration)))
            self._chain(conn, "calibration", digest)
        return digest

    def add_calibration(self, calibration: dict[str, Any]) -> str:
        """Store a calibration once and return its content hash."""
        try:
            calibration_hash(calibration)
        except ValueError as exc:
            raise ArchiveError(f"{self.path}: cannot store calibration: {exc}") from None
        with self._writing("store a calibration") as conn:
            return self._insert_calibration(conn, calibration)

    def get_calibration(self, digest: str) -> dict[str, Any]:
        """The calibration stored under ``digest``."""
        rows = self._query("SELECT json FROM calibrations WHERE hash = ?", (digest,))
        if not rows:
            raise self._missing("calibration", digest)
        return json.loads(rows[0][0])

    def list_calibrations(self) -> list[str]:
        """Hashes of all stored calibrations, sorted."""
        return [row[0] for row in self._query("SELECT hash FROM calibrations ORDER BY hash")]
