"""JSON export and import, CSV tables and backups."""

from __future__ import annotations

import csv
import json
import os
from pathlib import Path

import pytest
from archive_factory import LOTS, PROCESSORS, escaped, make_draft, make_strip, raw_connection, tiny_png

from stripscan.archive import Archive, ArchiveConflictError, ArchiveError, QcEntry
from stripscan.archive.records import FIGURE_UNITS, FIGURES

TABLES = ("film_types", "emulsion_lots", "processors", "sensitometers", "calibrations", "snapshots",
          "snapshot_data", "snapshot_steps", "snapshot_notes", "qc_entries", "qc_events", "qc_settings", "crossovers")


def _tables(where: Archive | Path) -> dict[str, list[tuple]]:
    """Every row of every table, as the archive's storage holds it (a file, or a server's tables)."""
    if isinstance(where, Archive):
        return {t: [tuple(row) for row in where._query(f"SELECT * FROM {t} ORDER BY 1, 2")] for t in TABLES}
    with raw_connection(where) as conn:
        return {t: conn.execute(f"SELECT * FROM {t} ORDER BY 1, 2").fetchall() for t in TABLES}


def _fill(archive: Archive) -> None:
    """A year's worth in miniature: revisions, retirements, notes, QC log, two calibrations."""
    archive.add_snapshots(make_draft(n, lot=LOTS[n % 2].lot_id, preview_png=tiny_png(shade=n) if n % 3 else None)
                          for n in range(6))
    archive.add_snapshot(make_draft(6, calibration={"kind": "step tablet", "od": [0.04, 1.5, 3.1], "note": "Größe"},
                                    strip=make_strip(2, nan_step=7), operator="Zoë Brünnhilde-Ōta"))
    fixed = archive.revise(2, make_draft(2, lot=LOTS[1].lot_id), "lot misread")
    archive.revise(fixed.id, make_draft(2, lot=LOTS[1].lot_id, notes="rescanned"), "rescanned after dust")
    archive.retire(4, "strip fogged")
    archive.add_note(1, "agrees with densitometer", "Mira Testwood")
    archive.add_note(fixed.id, "see service report 2024-17")
    for day, mid in (("2024-10-01", 1.21), ("2024-10-02", 1.24)):
        archive.add_qc_entry(QcEntry(PROCESSORS[0].name, day, 0.19, mid, 1.83, "scan", 1, "", ""))
    archive.add_qc_entry(QcEntry(PROCESSORS[1].name, "2024-10-02", 0.2, 1.3, None, "manual", None, "typed in",
                                 "replenisher topped up"))
    archive.add_qc_entry(QcEntry(PROCESSORS[0].name, "2024-10-02", 0.19, 1.22, 1.83), repeat=True)
    archive.add_qc_correction(3, "density difference was read, not typed", density_difference=1.79)
    archive.add_qc_event(PROCESSORS[0].name, "2024-10-02", "chemistry change", "fresh developer")
    archive.set_qc_settings(PROCESSORS[0].name, {"operating levels": {"mid_density": 1.22}, "control limit": 0.15})
    archive.add_crossover(PROCESSORS[0].name, "2024-10-14", {"old lot": LOTS[0].lot_id, "new lot": LOTS[1].lot_id,
                                                             "mid_density shift": 0.03})


@pytest.fixture
def filled(archive: Archive) -> Archive:
    _fill(archive)
    return archive


def test_export_then_import_reproduces_the_archive_exactly(filled: Archive,
                                                           tmp_path: Path) -> None:
    exported = filled.export_json(tmp_path / "year.json")
    with Archive.open(tmp_path / "copy.sqlite3") as copy:
        report = copy.import_json(exported)
        again = copy.export_json(tmp_path / "again.json")
        # JSON form: a NaN density never equals itself as a float.
        assert [copy.get_snapshot(i).to_dict() for i in range(1, 10)] == \
            [filled.get_snapshot(i).to_dict() for i in range(1, 10)]
    assert again.read_bytes() == exported.read_bytes()
    # Row for row, including steps, revision links, retirements, previews and QC tables.
    assert _tables(tmp_path / "copy.sqlite3") == _tables(filled)
    assert report.added["snapshots"] == 9 and report.added["calibrations"] == 2
    assert sum(report.unchanged.values()) == 0
    data = json.loads(exported.read_text(encoding="utf-8"))
    assert data["format"] == "stripscan lot archive" and data["format_version"] == 3
    # Ids, times and links of the QC log go along, so repeats and corrections come back as they were.
    assert [(e["id"], e["repeat_of"], e["corrects"]) for e in data["qc_entries"]] == [
        (1, None, None), (2, None, None), (4, 2, None), (3, None, None), (5, None, 3)]
    assert all(e["recorded_at"] for e in data["qc_entries"])
    assert sum(1 for s in data["snapshots"] if s["preview_png"]) == 4


def test_importing_the_same_file_twice_changes_nothing(filled: Archive, tmp_path: Path) -> None:
    exported = filled.export_json(tmp_path / "year.json")
    before = _tables(filled)
    report = filled.import_json(exported)
    assert sum(report.added.values()) == 0
    assert report.unchanged["snapshots"] == 9 and report.unchanged["qc_entries"] == 5
    assert _tables(filled) == before


def test_conflicting_id_stops_the_whole_import(filled: Archive, tmp_path: Path) -> None:
    exported = filled.export_json(tmp_path / "year.json")
    data = json.loads(exported.read_text(encoding="utf-8"))
    data["snapshots"][2]["notes"] = "edited elsewhere"
    data["film_types"].append({"name": "Rowan B", "description": "would be new"})
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data), encoding="utf-8")
    before = _tables(filled)
    with pytest.raises(ArchiveConflictError, match=rf"^{escaped(edited)}: snapshot 3 differs from the one already in "
                                                   rf"{escaped(str(filled.path))}; nothing was imported"):
        filled.import_json(edited)
    assert _tables(filled) == before


def test_failure_late_in_an_import_leaves_nothing_behind(archive: Archive, tmp_path: Path) -> None:
    archive.add_snapshots(make_draft(n) for n in range(3))
    exported = archive.export_json(tmp_path / "small.json")
    data = json.loads(exported.read_text(encoding="utf-8"))
    data["qc_entries"] = [QcEntry("Processor nobody added", "2024-10-01", 0.2, 1.2, 1.8).to_dict()]
    broken = tmp_path / "broken.json"
    broken.write_text(json.dumps(data), encoding="utf-8")
    with Archive.open(tmp_path / "fresh.sqlite3") as fresh:
        empty = _tables(tmp_path / "fresh.sqlite3")
        with pytest.raises(ArchiveError, match=rf"^{escaped(broken)}: cannot import QC entry of 'Processor nobody added' "
                                               "on 2024-10-01: .*not in the archive; nothing was imported"):
            fresh.import_json(broken)
    assert _tables(tmp_path / "fresh.sqlite3") == empty


def test_a_qc_entry_differing_under_the_same_id_stops_the_import(filled: Archive,
                                                                 tmp_path: Path) -> None:
    exported = filled.export_json(tmp_path / "year.json")
    data = json.loads(exported.read_text(encoding="utf-8"))
    data["qc_entries"][2]["mid_density"] = 1.5  # entry 4, the repeat strip
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data), encoding="utf-8")
    before = _tables(filled)
    with pytest.raises(ArchiveConflictError, match="QC entry 4 \\('North room', 2024-10-02\\) differs"):
        filled.import_json(edited)
    assert _tables(filled) == before


def test_a_version_1_export_without_qc_ids_is_still_read(archive: Archive, tmp_path: Path) -> None:
    # As version 1 wrote them: no id, no time, no links.
    old = [QcEntry(PROCESSORS[0].name, day, 0.19, mid, 1.83).to_dict() for day, mid in
           (("2024-10-02", 1.24), ("2024-10-01", 1.21))]
    for entry in old:
        for key in ("id", "recorded_at", "repeat_of", "corrects", "reason"):
            del entry[key]
    path = tmp_path / "from-version-1.json"
    path.write_text(json.dumps({"format": "stripscan lot archive", "format_version": 1, "qc_entries": old}),
                    encoding="utf-8")
    assert archive.import_json(path).added["qc_entries"] == 2
    stored = archive.list_qc_entries()
    assert [(e.id, e.date, e.recorded_at) for e in stored] == [(2, "2024-10-01", None), (1, "2024-10-02", None)]
    again = archive.import_json(path)
    assert again.unchanged["qc_entries"] == 2 and sum(again.added.values()) == 0


@pytest.mark.parametrize("content, message", [
    ('{"format": "stripscan lot archive", "format_version": 1,\n "snapshots": [}', "is not valid JSON: .* line 2"),
    ('{"rows": []}', "is not a stripscan archive export"),
    ('{"format": "stripscan lot archive", "format_version": 7}', "uses export format version 7"),
    ('{"format": "stripscan lot archive", "format_version": 1, "emulsion_lots": [{"lot_id": "X", '
     '"expiry_date": "31/01/2026"}]}', "emulsion_lots item 1: expiry date '31/01/2026' is not a date"),
    ('{"format": "stripscan lot archive", "format_version": 1, "snapshots": [{"id": 1}]}',
     "snapshots item 1: Snapshot data lacks the field 'created_at'"),
])
def test_unfit_import_files_are_named_with_the_problem(archive: Archive, tmp_path: Path, content: str,
                                                       message: str) -> None:
    path = tmp_path / "incoming.json"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(ArchiveError, match=rf"^{escaped(path)}:? {message}"):
        archive.import_json(path)


def test_edited_calibration_is_caught_by_its_hash(filled: Archive, tmp_path: Path) -> None:
    exported = filled.export_json(tmp_path / "year.json")
    data = json.loads(exported.read_text(encoding="utf-8"))
    data["calibrations"][0]["calibration"]["scanner"] = "another scanner"
    exported.write_text(json.dumps(data), encoding="utf-8")
    with Archive.open(tmp_path / "fresh.sqlite3") as fresh, \
            pytest.raises(ArchiveError, match="calibrations item 1: its content does not match its hash"):
        fresh.import_json(exported)


def test_csv_has_a_header_with_units_and_one_row_per_current_snapshot(filled: Archive, tmp_path: Path) -> None:
    path = filled.export_csv(tmp_path / "figures.csv")
    raw = path.read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")  # UTF-8 byte order mark (Unicode standard, ch. 23.8)
    with path.open(encoding="utf-8-sig", newline="") as handle:
        rows = list(csv.reader(handle))  # RFC 4180 quoting, read back by the csv module
    header, body = rows[0], rows[1:]
    assert header[7:15] == [f"{name} [{FIGURE_UNITS[name]}]" for name in FIGURES]
    assert "base_fog [OD]" in header and "speed_log_exposure [log10 rel. exposure]" in header
    listed = filled.list_snapshots()
    assert [int(r[0]) for r in body] == [s.id for s in listed]
    for row, summary in zip(body, listed):
        values = [float(v) if v else None for v in row[7:15]]
        assert values == [getattr(summary, name) for name in FIGURES]
        assert row[16] == "current"
    assert "Zoë Brünnhilde-Ōta" in {r[5] for r in body}
    everything = filled.export_csv(tmp_path / "all.csv", include_retired=True, include_superseded=True)
    with everything.open(encoding="utf-8-sig", newline="") as handle:
        statuses = [r[16] for r in list(csv.reader(handle))[1:]]
    assert statuses.count("current") == len(listed)
    assert "retired" in " ".join(statuses) and "revised by snapshot 8" in statuses


def test_csv_text_that_looks_like_a_formula_is_defused(archive: Archive, tmp_path: Path) -> None:
    archive.add_snapshot(make_draft(0, operator="=HYPERLINK(\"x\")"))
    path = archive.export_csv(tmp_path / "figures.csv")
    with path.open(encoding="utf-8-sig", newline="") as handle:
        row = list(csv.reader(handle))[1]
    # common practice (OWASP "CSV injection"): prefix formula-like text with an apostrophe.
    assert row[5] == "'=HYPERLINK(\"x\")"


def test_export_into_a_missing_folder_says_so_and_leaves_nothing(filled: Archive, tmp_path: Path) -> None:
    target = tmp_path / "no such folder" / "year.json"
    with pytest.raises(ArchiveError, match=rf"^{escaped(target)}: cannot write"):
        filled.export_json(target)
    assert not target.parent.exists()


def test_failed_export_keeps_the_previous_file(filled: Archive, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    (tmp_path / "exports").mkdir()
    target = tmp_path / "exports" / "year.json"
    target.write_text("previous export", encoding="utf-8")
    from stripscan.archive import exchange

    def fail_half_way(handle: object, data: object) -> None:
        handle.write('{"format": "stripscan lot archive", "snapshots": [')  # type: ignore[attr-defined]
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(exchange, "_write_lines", fail_half_way)
    with pytest.raises(ArchiveError, match="cannot write: No space left on device"):
        filled.export_json(target)
    assert target.read_text(encoding="utf-8") == "previous export"
    assert os.listdir(target.parent) == ["year.json"]


def test_backup_copies_committed_data_while_a_write_is_open(filled: Archive, archive_path: Path,
                                                            tmp_path: Path) -> None:
    with raw_connection(archive_path) as writer:
        writer.execute("BEGIN IMMEDIATE")
        writer.execute("INSERT INTO film_types (name) VALUES ('not yet committed')")
        # Python docs: sqlite3.Connection.backup uses SQLite's online backup API,
        # which copies a consistent committed state while others use the file.
        copy = filled.backup(tmp_path / "backup.sqlite3")
        writer.execute("ROLLBACK")
    with raw_connection(copy) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    assert _tables(copy) == _tables(archive_path)
    with Archive.open(copy) as restored:
        assert restored.history(2) == filled.history(2)


def test_backup_refuses_to_overwrite_unless_asked(filled: Archive, archive_path: Path, tmp_path: Path) -> None:
    target = tmp_path / "backup.sqlite3"
    target.write_bytes(b"older backup")
    with pytest.raises(ArchiveError, match=rf"^{escaped(target)} already exists"):
        filled.backup(target)
    assert target.read_bytes() == b"older backup"
    filled.backup(target, overwrite=True)
    assert _tables(target) == _tables(archive_path)
    with pytest.raises(ArchiveError, match="cannot overwrite the archive itself"):
        filled.backup(archive_path, overwrite=True)
    assert not [p for p in tmp_path.iterdir() if "partial" in p.name]


def test_backup_of_a_copy_opened_by_sqlite_alone_has_the_same_schema(filled: Archive, tmp_path: Path) -> None:
    copy = filled.backup(tmp_path / "backup.sqlite3")
    # The schema this stripscan gives a new file (a server archive's backup is a file too).
    Archive.open(tmp_path / "fresh.sqlite3").close()
    with raw_connection(copy) as conn, raw_connection(tmp_path / "fresh.sqlite3") as original:
        schema = "SELECT type, name, sql FROM sqlite_master ORDER BY name"
        assert conn.execute(schema).fetchall() == original.execute(schema).fetchall()
        assert conn.execute("PRAGMA user_version").fetchone() == original.execute("PRAGMA user_version").fetchone()
