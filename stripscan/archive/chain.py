"""A hash chain over everything the archive stores, so that an edit made behind its back shows.

The triggers in the file stop this program, and any other tool that leaves
them in place, from changing stored history.  Someone with the file can
still drop a trigger, change a value and put the trigger back; SQLite's own
checks then see nothing wrong.  The chain makes such an edit visible:

* every stored record (a snapshot with its data and steps, a retirement, a
  calibration, a note, a QC entry, event, crossover or settings row, a
  film type, lot, processor or sensitometer) gets one row in
  ``record_chain``, written in the same transaction as the record;
* the row keeps ``content_sha256``, the SHA-256 of the record's stored
  content, and ``chain_sha256``, the SHA-256 of its predecessor's
  ``chain_sha256``, its kind, key and ``content_sha256``;
* :func:`verify` walks the whole chain and names the first record whose
  stored content no longer matches, or whose link does not follow from the
  one before; it also names rows that are stored but not in the chain;
* :func:`check_head` is the cheap check run whenever the archive is
  opened: the latest record and the row counts.

What it proves and what it does not: a change made to stored rows without
rebuilding the chain is detected.  It cannot prevent a change, and someone
who has the file and rebuilds the whole chain after an edit is not caught
by the file alone; the head hash printed by ``stripscan archive verify``,
written down elsewhere (a QC report, a paper log), is what shows that.

A record's content is the canonical JSON of its stored columns, NULL ones
left out (so that a later schema step adding a column with a NULL default
leaves old records matching); BLOBs are written as hex.  A lot's details
may be filled in later: a lot then has several records and only the latest
must match.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection

__all__ = ["KINDS", "GENESIS", "ChainReport", "content_sha256", "append", "append_all", "verify", "check_head"]

#: Chain hash before the first record.
GENESIS = "0" * 64

# kind -> (table, key column, words for messages).  Keys are stored as text.
KINDS: dict[str, tuple[str, str, str]] = {
    "film_type": ("film_types", "name", "film type"),
    "lot": ("emulsion_lots", "lot_id", "lot"),
    "processor": ("processors", "name", "processor"),
    "sensitometer": ("sensitometers", "sensitometer_id", "sensitometer"),
    "calibration": ("calibrations", "hash", "calibration"),
    "snapshot": ("snapshots", "id", "snapshot"),
    "retirement": ("snapshots", "id", "retirement of snapshot"),
    "note": ("snapshot_notes", "id", "note"),
    "qc_settings": ("qc_settings", "id", "QC settings row"),
    "qc_entry": ("qc_entries", "id", "QC entry"),
    "qc_event": ("qc_events", "id", "QC event"),
    "crossover": ("crossovers", "id", "crossover"),
}

_RETIRED = ("retired_at", "retired_reason")
_INTEGER_KEYS = {kind for kind, (_, column, _) in KINDS.items() if column == "id"}


def _key(kind: str, key: str) -> Any:
    return int(key) if kind in _INTEGER_KEYS else key


def _row(conn: "Connection", sql: str, params: tuple[Any, ...]) -> dict[str, Any] | None:
    cursor = conn.execute(sql, params)
    names = [d[0] for d in cursor.description]
    found = cursor.fetchone()
    return None if found is None else dict(zip(names, found))


def _plain(row: dict[str, Any]) -> dict[str, Any]:
    return {k: (v.hex() if isinstance(v, bytes) else v) for k, v in row.items() if v is not None}


def _content(conn: "Connection", kind: str, key: str) -> dict[str, Any] | None:
    """The stored content of one record as plain data; None when it is not stored."""
    table, column, _ = KINDS[kind]
    row = _row(conn, f"SELECT * FROM {table} WHERE {column} = ?", (_key(kind, key),))
    if row is None:
        return None
    if kind == "retirement":
        return _plain({k: row[k] for k in _RETIRED}) if row["retired_at"] is not None else None
    if kind == "snapshot":
        for name in _RETIRED:
            row.pop(name)
        data = _row(conn, "SELECT * FROM snapshot_data WHERE snapshot_id = ?", (row["id"],))
        cursor = conn.execute("SELECT * FROM snapshot_steps WHERE snapshot_id = ? ORDER BY step", (row["id"],))
        names = [d[0] for d in cursor.description]
        steps = [_plain(dict(zip(names, values))) for values in cursor.fetchall()]
        return {"snapshot": _plain(row), "data": _plain(data) if data else None, "steps": steps}
    return _plain(row)


def content_sha256(conn: "Connection", kind: str, key: str) -> str | None:
    """SHA-256 of a record's stored content (hex); None when the record is not stored."""
    content = _content(conn, kind, key)
    if content is None:
        return None
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _link(previous: str, kind: str, key: str, content: str) -> str:
    return hashlib.sha256(f"{previous}\n{kind}\n{key}\n{content}".encode("utf-8")).hexdigest()


def _head(conn: "Connection") -> tuple[int, str]:
    row = conn.execute("SELECT seq, chain_sha256 FROM record_chain ORDER BY seq DESC LIMIT 1").fetchone()
    return (0, GENESIS) if row is None else (row[0], row[1])


def append(conn: "Connection", kind: str, key: Any) -> None:
    """Add the record just written (inside the caller's transaction) to the chain."""
    key = str(key)
    content = content_sha256(conn, kind, key)
    if content is None:
        raise LookupError(f"{KINDS[kind][2]} {key} is not stored; only a stored record joins the chain")
    seq, previous = _head(conn)
    conn.execute("INSERT INTO record_chain (seq, kind, key, content_sha256, chain_sha256) VALUES (?, ?, ?, ?, ?)",
                 (seq + 1, kind, key, content, _link(previous, kind, key, content)))


def _only_stored(kind: str) -> str:
    # A retirement is stored where a snapshot has its retirement columns filled.
    return " WHERE retired_at IS NOT NULL" if kind == "retirement" else ""


def _stored_keys(conn: "Connection", kind: str) -> Iterator[str]:
    table, column, _ = KINDS[kind]
    where = _only_stored(kind)
    order = "id" if kind in _INTEGER_KEYS else column
    for (key,) in conn.execute(f"SELECT {column} FROM {table}{where} ORDER BY {order}"):
        yield str(key)


def append_all(conn: "Connection") -> int:
    """Chain every stored record not in the chain yet (the upgrade of an older archive); return how many."""
    chained = {(k, key) for k, key in conn.execute("SELECT kind, key FROM record_chain")}
    added = 0
    for kind in KINDS:
        for key in list(_stored_keys(conn, kind)):
            if (kind, key) not in chained:
                append(conn, kind, key)
                added += 1
    return added


@dataclass(frozen=True)
class ChainReport:
    """What a walk of the chain found.

    Attributes
    ----------
    records : int
        Records in the chain.
    head_seq : int
        Number of the latest record (0 for an empty chain).
    head_sha256 : str
        Its chain hash: write it down elsewhere to tell later whether the
        whole chain was rebuilt.
    problem : str or None
        The first record that does not match, in words; None when all match.
    problem_seq : int or None
        Its number in the chain, when the problem is a chain record.
    """

    records: int
    head_seq: int
    head_sha256: str
    problem: str | None = None
    problem_seq: int | None = None

    @property
    def ok(self) -> bool:
        return self.problem is None


def _name(kind: str, key: str) -> str:
    return f"{KINDS[kind][2] if kind in KINDS else kind} {key}"


def _record(seq: int, kind: str, key: str) -> str:
    return f"record {seq} of the chain ({_name(kind, key)})"


def verify(conn: "Connection") -> ChainReport:
    """Walk the whole chain; report the first record that does not match its stored content or its predecessor."""
    rows = conn.execute("SELECT seq, kind, key, content_sha256, chain_sha256 FROM record_chain ORDER BY seq").fetchall()
    latest = {(kind, key): seq for seq, kind, key, _, _ in rows}
    head_seq, head = (rows[-1][0], rows[-1][4]) if rows else (0, GENESIS)

    def report(problem: str, seq: int | None = None) -> ChainReport:
        return ChainReport(len(rows), head_seq, head, problem, seq)

    previous, expected_seq = GENESIS, 1
    for seq, kind, key, content, chained in rows:
        where = _record(seq, kind, key)
        if seq != expected_seq:
            return report(f"{where}: record {expected_seq} is missing from the chain", seq)
        if kind not in KINDS or chained != _link(previous, kind, key, content):
            return report(f"{where}: its chain hash does not follow from the record before it "
                          "(the chain itself was edited)", seq)
        if latest[(kind, key)] == seq:
            now = content_sha256(conn, kind, key)
            if now is None:
                return report(f"{where}: the record is no longer stored (deleted outside stripscan)", seq)
            if now != content:
                return report(f"{where}: the stored content no longer matches the hash taken when it was "
                              "stored (changed outside stripscan)", seq)
        previous, expected_seq = chained, expected_seq + 1
    for kind in KINDS:
        for key in _stored_keys(conn, kind):
            if (kind, key) not in latest:
                return report(f"{_name(kind, key)} is stored but not in the chain (added outside stripscan)")
    return ChainReport(len(rows), head_seq, head)


def check_head(conn: "Connection") -> str | None:
    """The cheap check on opening: the latest record matches, and every stored row is chained.

    Returns
    -------
    str or None
        What is wrong, in words; None when the head and the counts match.
    """
    rows = conn.execute("SELECT seq, kind, key, content_sha256, chain_sha256 FROM record_chain "
                        "ORDER BY seq DESC LIMIT 2").fetchall()
    if rows:
        seq, kind, key, content, chained = rows[0]
        previous = rows[1][4] if len(rows) > 1 else GENESIS
        name = _record(seq, kind, key)
        if kind not in KINDS or chained != _link(previous, kind, key, content):
            return f"{name}: its chain hash does not follow from the record before it"
        if content_sha256(conn, kind, key) != content:
            return f"{name}: the stored content no longer matches its hash"
    chained_count = conn.execute("SELECT count(*) FROM (SELECT DISTINCT kind, key FROM record_chain)").fetchone()[0]
    stored = 0
    for kind, (table, _, _) in KINDS.items():
        stored += conn.execute(f"SELECT count(*) FROM {table}{_only_stored(kind)}").fetchone()[0]
    if stored != chained_count:
        return f"{stored} records are stored but {chained_count} are in the chain"
    return None
