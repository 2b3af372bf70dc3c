"""Storing and reading snapshots, revisions, retirement, listings and trends."""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import math

import pytest
from archive_factory import FILM, LOTS, PROCESSORS, SENSITOMETER, make_draft, make_scan, make_strip, tiny_png

from stripscan.archive import (
    FIGURES,
    Archive,
    ArchiveConflictError,
    ArchiveError,
    ArchiveLookupError,
    EmulsionLot,
    FilmType,
    LotSummary,
    Processor,
    QcEntry,
    Sensitometer,
    SnapshotNote,
    SnapshotSummary,
    snapshots_from_analysis,
)
from stripscan.core.records import Analysis


def test_snapshot_reads_back_as_stored(archive: Archive) -> None:
    draft = make_draft(5, preview_png=tiny_png())
    stored = archive.add_snapshot(draft)
    again = archive.get_snapshot(stored.id)
    assert again == stored
    for name in ("lot_id", "processor", "sensitometer", "operator", "exposed_on", "processed_on", "scanned_on",
                 "settings", "warnings", "program_version", "notes", "preview_png", "scan"):
        assert getattr(again, name) == getattr(draft, name), name
    # The strip goes through its own JSON form (the core's to_dict rounds),
    # so compare it in that form.
    assert again.strip.to_dict() == draft.strip.to_dict()
    assert again.revises is None and again.retired_at is None


def test_created_at_is_utc_iso_time_of_storing(archive: Archive) -> None:
    before = dt.datetime.now(dt.timezone.utc)
    stored = archive.add_snapshot(make_draft(0))
    after = dt.datetime.now(dt.timezone.utc)
    # ISO 8601 with "Z" for UTC.
    assert stored.created_at.endswith("Z")
    created = dt.datetime.fromisoformat(stored.created_at[:-1] + "+00:00")
    assert before <= created <= after


def test_calibration_is_stored_once_under_its_content_hash(archive: Archive) -> None:
    first = archive.add_snapshot(make_draft(0))
    second = archive.add_snapshot(make_draft(1))
    calibration = make_draft(0).calibration
    # The project's definition: sha256 of json.dumps(d, sort_keys=True, separators=(",", ":")).
    expected = hashlib.sha256(json.dumps(calibration, sort_keys=True, separators=(",", ":")).encode()).hexdigest()
    assert first.calibration_hash == second.calibration_hash == expected
    assert archive.get_calibration(expected) == calibration
    # As stored, read through the archive's own connection (a file or a server).
    rows = archive._query("SELECT hash, json FROM calibrations")
    assert len(rows) == 1
    assert hashlib.sha256(rows[0][1].encode()).hexdigest() == rows[0][0]


def test_step_table_and_figure_columns_match_the_strip(archive: Archive) -> None:
    stored = archive.add_snapshot(make_draft(2, strip=make_strip(1, nan_step=4)))
    strip = stored.strip.to_dict()
    table = archive.step_table(stored.id)
    assert [row[0] for row in table] == [s["step"] for s in strip["steps"]]
    for (step, log_e, od, od_sd, in_range, excluded), source in zip(table, strip["steps"]):
        assert (log_e, od, od_sd, in_range, excluded) == (
            source["log_exposure"], source["od"], source["od_sd"], source["in_range"], source["excluded"])
    assert table[3][2] is None and table[3][5] is True  # the unreadable step is kept as NULL
    assert math.isnan(stored.strip.steps[3].od)
    columns = archive._query(f"SELECT {', '.join(FIGURES)} FROM snapshots WHERE id = ?", (stored.id,))[0]
    assert tuple(columns) == tuple(strip["metrics"][name] for name in FIGURES)


def test_bad_fields_are_refused_when_the_record_is_made() -> None:
    with pytest.raises(ValueError, match="exposure date '2024-13-01' is not a calendar date"):
        make_draft(0, exposed_on="2024-13-01")
    with pytest.raises(ValueError, match="processing date '21.10.2024' is not a date written YYYY-MM-DD"):
        make_draft(0, processed_on="21.10.2024")
    with pytest.raises(ValueError, match="preview is not a PNG image"):
        make_draft(0, preview_png=b"GIF89a" + bytes(20))
    big = tiny_png() + bytes(64 * 1024)
    with pytest.raises(ValueError, match=f"preview is {len(big)} bytes; at most 65536"):
        make_draft(0, preview_png=big)
    with pytest.raises(ValueError, match="scan sha256 'abc' is not 64"):
        make_draft(0, scan=dataclasses.replace(make_scan(), sha256="abc"))
    with pytest.raises(ValueError, match="not storable as JSON"):
        make_draft(0, settings={"increment": float("nan")})
    with pytest.raises(ValueError, match="lot id must be a non-empty text"):
        make_draft(0, lot=" ")


def test_unknown_names_are_refused_unless_asked_to_create_them(archive: Archive) -> None:
    with pytest.raises(ArchiveLookupError, match="lot 'ALD-9999' is not in the archive"):
        archive.add_snapshot(make_draft(0, lot="ALD-9999"))
    with pytest.raises(ArchiveLookupError, match="processor 'West room' is not in the archive"):
        archive.add_snapshot(make_draft(0, processor="West room"))
    with pytest.raises(ArchiveLookupError, match="sensitometer 'LV-SENS-9' is not in the archive"):
        archive.add_snapshot(make_draft(0, sensitometer="LV-SENS-9"))
    assert archive.list_snapshots() == []
    stored = archive.add_snapshot(make_draft(0, lot="ALD-9999", processor="West room"), create_missing=True)
    assert archive.get_lot("ALD-9999") == EmulsionLot("ALD-9999")
    assert archive.get_processor("West room") == Processor("West room")
    assert stored.lot_id == "ALD-9999"


def test_a_batch_is_stored_whole_or_not_at_all(archive: Archive) -> None:
    batch = [make_draft(0), make_draft(1), make_draft(2, lot="ALD-0000"), make_draft(3)]
    with pytest.raises(ArchiveLookupError, match="ALD-0000"):
        archive.add_snapshots(batch)
    counts = [archive._query(f"SELECT count(*) FROM {t}")[0][0] for t in ("snapshots", "snapshot_steps", "calibrations")]
    assert counts == [0, 0, 0]
    assert len(archive.add_snapshots(batch[:2] + batch[3:])) == 3


def test_listing_filters_and_orders_by_film_date(archive: Archive) -> None:
    # Stored out of order; listings follow the film's date.
    for number, lot, processor in ((9, LOTS[0], PROCESSORS[0]), (2, LOTS[1], PROCESSORS[1]),
                                   (5, LOTS[0], PROCESSORS[1]), (1, LOTS[1], PROCESSORS[0])):
        archive.add_snapshot(make_draft(number, lot=lot.lot_id, processor=processor.name))
    listed = archive.list_snapshots()
    assert [s.date for s in listed] == sorted(s.date for s in listed)
    assert [s.date for s in listed] == ["2024-10-02", "2024-10-03", "2024-10-06", "2024-10-10"]
    assert {s.id for s in archive.list_snapshots(lot=LOTS[0].lot_id)} == {1, 3}
    assert {s.id for s in archive.list_snapshots(processor=PROCESSORS[1].name)} == {2, 3}
    assert [s.id for s in archive.list_snapshots(LOTS[1].lot_id, PROCESSORS[0].name)] == [4]
    first = archive.get_snapshot(1)
    summary = next(s for s in listed if s.id == 1)
    assert [getattr(summary, name) for name in FIGURES] == [getattr(first.figures, name) for name in FIGURES]


def test_listed_summaries_are_ordinary_frozen_records(archive: Archive) -> None:
    archive.add_snapshot(make_draft(0))
    summary = archive.list_snapshots()[0]
    assert summary == SnapshotSummary(**summary.to_dict())
    assert repr(summary).startswith("SnapshotSummary(id=1, ")
    with pytest.raises(dataclasses.FrozenInstanceError):
        summary.lot_id = "ALD-0000"  # type: ignore[misc]


def test_date_falls_back_from_processing_to_exposure_to_scan_to_storage(archive: Archive) -> None:
    a = archive.add_snapshot(make_draft(0, processed_on=None, exposed_on="2024-09-01"))
    b = archive.add_snapshot(make_draft(0, processed_on=None, exposed_on=None, scanned_on="2024-09-02"))
    c = archive.add_snapshot(make_draft(0, processed_on=None, exposed_on=None, scanned_on=None))
    assert (a.date, b.date, c.date) == ("2024-09-01", "2024-09-02", c.created_at[:10])
    assert [s.date for s in archive.list_snapshots()] == ["2024-09-01", "2024-09-02", c.created_at[:10]]


def test_revision_chain_and_current_listing(archive: Archive) -> None:
    original = archive.add_snapshot(make_draft(0))
    other = archive.add_snapshot(make_draft(1))
    fixed = archive.revise(original.id, make_draft(0, lot=LOTS[1].lot_id), "lot number misread from the box")
    again = archive.revise(fixed.id, make_draft(0, lot=LOTS[1].lot_id, operator="Mira Testwood"),
                           "operator was wrong")
    assert fixed.revises == original.id and fixed.revision_reason == "lot number misread from the box"
    assert [s.id for s in archive.history(original.id)] == [original.id, fixed.id, again.id]
    assert archive.history(again.id) == archive.history(fixed.id) == archive.history(original.id)
    assert [s.id for s in archive.history(other.id)] == [other.id]
    assert {s.id for s in archive.list_snapshots()} == {again.id, other.id}
    everything = {s.id: s for s in archive.list_snapshots(include_superseded=True)}
    assert everything[original.id].superseded_by == fixed.id and not everything[original.id].current
    assert everything[again.id].superseded_by is None and everything[again.id].current
    # The corrected snapshot is untouched and still readable.
    assert archive.get_snapshot(original.id) == original


def test_only_the_latest_revision_can_be_revised(archive: Archive) -> None:
    original = archive.add_snapshot(make_draft(0))
    fixed = archive.revise(original.id, make_draft(1), "wrong strip")
    with pytest.raises(ArchiveConflictError, match=f"snapshot {original.id} has already been revised by "
                                                   f"snapshot {fixed.id}"):
        archive.revise(original.id, make_draft(2), "another try")
    with pytest.raises(ArchiveError, match="only with a reason"):
        archive.revise(fixed.id, make_draft(2), "   ")
    with pytest.raises(ArchiveLookupError, match="snapshot 99 is not in the archive"):
        archive.revise(99, make_draft(2), "no such")
    assert len(archive.list_snapshots(include_superseded=True)) == 2


def test_retiring_hides_but_keeps_the_snapshot(archive: Archive) -> None:
    kept = archive.add_snapshot(make_draft(0))
    fogged = archive.add_snapshot(make_draft(1))
    retired = archive.retire(fogged.id, "film fogged by a darkroom light leak")
    assert retired.retired and retired.retired_reason == "film fogged by a darkroom light leak"
    assert dataclasses.replace(retired, retired_at=None, retired_reason=None) == fogged
    assert [s.id for s in archive.list_snapshots()] == [kept.id]
    assert [s.id for s in archive.list_snapshots(include_retired=True)] == [kept.id, fogged.id]
    assert [p.snapshot_id for p in archive.trend("base_fog")] == [kept.id]
    assert archive.get_snapshot(fogged.id) == retired
    with pytest.raises(ArchiveConflictError, match="was retired on .* cannot be retired"):
        archive.retire(fogged.id, "again")
    with pytest.raises(ArchiveConflictError, match="a retired snapshot cannot be revised"):
        archive.revise(fogged.id, make_draft(1), "try to bring it back")
    with pytest.raises(ArchiveError, match="only with a reason"):
        archive.retire(kept.id, "")


def test_retiring_a_corrected_reading_means_retiring_its_latest_revision(archive: Archive) -> None:
    original = archive.add_snapshot(make_draft(0))
    fixed = archive.revise(original.id, make_draft(1), "wrong strip")
    with pytest.raises(ArchiveConflictError, match="only the latest revision can be retired"):
        archive.retire(original.id, "withdraw")
    archive.retire(fixed.id, "withdraw the whole reading")
    assert archive.list_snapshots() == []
    assert len(archive.list_snapshots(include_retired=True, include_superseded=True)) == 2


def test_trend_gives_dated_values_of_current_snapshots(archive: Archive) -> None:
    stored = [archive.add_snapshot(make_draft(n, lot=LOTS[n % 2].lot_id)) for n in (4, 1, 7, 3)]
    no_speed = make_strip(1)
    no_speed = dataclasses.replace(no_speed, figures=dataclasses.replace(no_speed.figures, speed_log_exposure=None))
    archive.add_snapshot(make_draft(2, strip=no_speed))
    archive.revise(stored[0].id, make_draft(4, lot=LOTS[0].lot_id, strip=make_strip(1, centre=1.61)), "rescanned")
    points = archive.trend("speed_log_exposure")
    assert [p.date for p in points] == sorted(p.date for p in points)
    current = {s.id: archive.get_snapshot(s.id) for s in archive.list_snapshots()}
    assert {p.snapshot_id for p in points} == {i for i, s in current.items() if s.figures.speed_log_exposure is not None}
    for point in points:
        snapshot = current[point.snapshot_id]
        assert point == (snapshot.date, snapshot.strip.to_dict()["metrics"]["speed_log_exposure"],
                         snapshot.lot_id, snapshot.id)
    assert {p.lot for p in archive.trend("gamma", lots=[LOTS[1].lot_id])} == {LOTS[1].lot_id}
    assert archive.trend("gamma", LOTS[1].lot_id) == archive.trend("gamma", lots=[LOTS[1].lot_id])
    assert {p.snapshot_id for p in archive.trend("dmax", processor=PROCESSORS[1].name)} == set()
    with pytest.raises(ArchiveError, match="unknown figure 'contrast'; choose one of base_fog"):
        archive.trend("contrast")


def test_lot_listing_counts_current_snapshots_and_spans_their_dates(archive: Archive) -> None:
    for number in (3, 9, 6):
        archive.add_snapshot(make_draft(number, lot=LOTS[0].lot_id))
    gone = archive.add_snapshot(make_draft(20, lot=LOTS[0].lot_id))
    archive.retire(gone.id, "strip cut from the wrong box")
    summaries = {s.lot.lot_id: s for s in archive.list_lots()}
    assert summaries[LOTS[0].lot_id] == LotSummary(LOTS[0], 3, "2024-10-04", "2024-10-10")
    assert summaries[LOTS[1].lot_id] == LotSummary(LOTS[1], 0, None, None)


def test_reference_data_is_added_once_and_read_back(archive: Archive) -> None:
    assert archive.list_film_types() == [FILM]
    assert archive.get_lot(LOTS[1].lot_id) == LOTS[1]
    assert archive.list_processors() == sorted(PROCESSORS, key=lambda p: p.name)
    assert archive.get_sensitometer(SENSITOMETER.sensitometer_id) == SENSITOMETER
    with pytest.raises(ArchiveConflictError, match="lot 'ALD-2407-11' is already in the archive"):
        archive.add_lot(EmulsionLot(LOTS[0].lot_id, notes="second try"))
    with pytest.raises(ArchiveLookupError, match="film type 'Rowan B' is not in the archive"):
        archive.add_lot(EmulsionLot("ROW-1", "Rowan B"))
    with pytest.raises(ArchiveLookupError, match="processor 'Nowhere' is not in the archive"):
        archive.get_processor("Nowhere")
    archive.add_film_type(FilmType("Rowan B"))
    archive.add_lot(EmulsionLot("ROW-1", "Rowan B"))
    assert archive.get_lot("ROW-1").film_type == "Rowan B"


def test_reference_records_check_their_values() -> None:
    with pytest.raises(ValueError, match=r"developer temperature \(degC\) 93.0 lies outside"):
        Processor("North room", developer_temperature_c=93.0)  # degF typed for degC
    with pytest.raises(ValueError, match="has no step log-exposure table"):
        Sensitometer("S-0")
    with pytest.raises(ValueError, match="expiry date '2025-02-30' is not a calendar date"):
        EmulsionLot("L-1", expiry_date="2025-02-30")


def test_notes_are_added_without_changing_the_snapshot(archive: Archive) -> None:
    stored = archive.add_snapshot(make_draft(0))
    note = archive.add_note(stored.id, "compared with the densitometer: agrees within 0.02 OD", "Mira Testwood")
    archive.add_note(stored.id, "second look: fine")
    assert archive.list_notes(stored.id)[0] == note
    assert [n.text for n in archive.list_notes(stored.id)] == [note.text, "second look: fine"]
    assert archive.get_snapshot(stored.id) == stored
    with pytest.raises(ArchiveLookupError, match="snapshot 42 is not in the archive"):
        archive.add_note(42, "orphan")
    with pytest.raises(ArchiveError, match="cannot add note: note text must be a non-empty text"):
        archive.add_note(stored.id, "  ")


def test_analysis_is_stored_one_snapshot_per_strip(archive: Archive) -> None:
    calibration = {"kind": "step tablet", "od": [0.1, 1.0, 2.0]}
    analysis = Analysis(make_scan("two strips.tif"), calibration, (make_strip(1), make_strip(2, centre=1.7)),
                        warnings=("lamp not warmed up",), program_version="0.1.0", settings={"n_steps": 21})
    stored = archive.add_analysis(analysis, LOTS[1].lot_id, processor=PROCESSORS[0].name, operator="Mira Testwood",
                                  processed_on="2024-11-05")
    assert [s.strip.index for s in stored] == [1, 2]
    for snapshot, strip in zip(stored, analysis.strips):
        assert snapshot.scan == analysis.scan and snapshot.strip.to_dict() == strip.to_dict()
        assert snapshot.warnings == ("lamp not warmed up",) and snapshot.settings == {"n_steps": 21}
        assert archive.get_calibration(snapshot.calibration_hash) == calibration
        assert (snapshot.lot_id, snapshot.processed_on) == (LOTS[1].lot_id, "2024-11-05")
    with pytest.raises(ValueError, match="come\\(s\\) from the analysis"):
        snapshots_from_analysis(analysis, "L", settings={})
    empty = dataclasses.replace(analysis, strips=())
    with pytest.raises(ArchiveError, match="no strip was found on /srv/linden-vale/scans/two strips.tif"):
        archive.add_analysis(empty, LOTS[1].lot_id)


@pytest.mark.parametrize("record", [
    FILM, LOTS[0], PROCESSORS[0], SENSITOMETER,
    QcEntry("North room", "2024-10-01", 0.19, 1.21, 1.85, "scan", 1, "ok", ""),
    SnapshotNote(1, 1, "2024-10-01T08:00:00.000000Z", "fine", "Mira Testwood"),
    LotSummary(LOTS[0], 2, "2024-10-01", "2024-10-02"),
], ids=lambda r: type(r).__name__)
def test_records_survive_json(record: object) -> None:
    text = json.dumps(record.to_dict())  # type: ignore[attr-defined]
    assert type(record).from_dict(json.loads(text)) == record  # type: ignore[attr-defined]


def test_stored_snapshot_survives_json(archive: Archive) -> None:
    stored = archive.add_snapshot(make_draft(3, preview_png=tiny_png(), strip=make_strip(2, nan_step=5)))
    retired = archive.retire(stored.id, "test")
    data = json.loads(json.dumps(retired.to_dict(), allow_nan=False))
    back = type(retired).from_dict(data)
    assert back.to_dict() == retired.to_dict()
    assert back.preview_png == tiny_png()  # base64 text in JSON (RFC 4648) decodes to the same bytes
    with pytest.raises(ValueError, match="lacks the field 'lot_id'"):
        type(retired).from_dict({k: v for k, v in data.items() if k != "lot_id"})


def test_mid_density_and_density_difference_trends_keep_the_lots_first_steps(archive: Archive) -> None:
    # Common practice (processor QC): once the mid-density and density-difference steps are
    # picked, the same steps are read every time.  A strip on its own picks the step closest
    # to its target, so a neighbour can pick the next step: 1.25 OD at step 10, 1.57 at step 11.
    lot = LOTS[0].lot_id
    first, shifted = make_strip(1, centre=1.60), make_strip(1, centre=1.62)
    assert (first.figures.mid_density_step, shifted.figures.mid_density_step) == (10, 11)  # the premise
    a = archive.add_snapshot(make_draft(1, lot=lot, strip=first))
    b = archive.add_snapshot(make_draft(2, lot=lot, strip=shifted))
    assert archive.lot_qc_steps(lot) == (10, 12, 6)  # the first snapshot's own choice
    od = {s.step: s.od for s in shifted.steps}
    md = {p.snapshot_id: p.value for p in archive.trend("mid_density", lot)}
    # Step densities are stored to 4 decimals.
    assert md == {a.id: pytest.approx(first.figures.mid_density, abs=1e-4), b.id: pytest.approx(od[10], abs=1e-4)}
    dd = {p.snapshot_id: p.value for p in archive.trend("density_difference", lot)}
    assert dd[b.id] == pytest.approx(od[12] - od[6], abs=2e-4)
    # Other figures stay each strip's own.
    assert {p.snapshot_id: p.value for p in archive.trend("speed_log_exposure", lot)}[b.id] == pytest.approx(
        shifted.figures.speed_log_exposure, abs=1e-5)
    # A lot with nothing stored has no steps and no points.
    assert archive.lot_qc_steps(LOTS[1].lot_id) is None and archive.trend("mid_density", LOTS[1].lot_id) == []


def test_a_lots_steps_come_from_its_first_strip_that_has_them(archive: Archive) -> None:
    # A first strip whose mid-density step could not be picked does not fix the lot's steps;
    # the next strip that has all three does (common practice, as above).
    lot = LOTS[0].lot_id
    bare = make_strip(1)
    bare = dataclasses.replace(bare, figures=dataclasses.replace(bare.figures, mid_density_step=None,
                                                                 mid_density=None))
    archive.add_snapshot(make_draft(1, lot=lot, strip=bare))
    later = archive.add_snapshot(make_draft(2, lot=lot, strip=make_strip(1, centre=1.62)))
    picked = later.strip.figures
    assert archive.lot_qc_steps(lot) == (picked.mid_density_step, picked.dd_high_step, picked.dd_low_step)
