-- Version 1 of the server schema: the SQLite archive's schema at its version 4
-- (stripscan/archive/sqlite/migrations.py), table for table and column for column, so
-- that the archive's portable SQL reads and writes both.
--
-- How SQLite's schema is carried over:
-- * INTEGER PRIMARY KEY -> bigint identity (BY DEFAULT, since the archive gives
--   ids itself and a copy keeps them); INTEGER -> bigint (SQLite's integers are
--   64-bit); REAL -> double precision; TEXT -> text; BLOB -> bytea.
-- * Every text column compares byte by byte (COLLATE "C"), as SQLite's
--   BINARY does, whatever the database's locale: listings sort the same.
-- * date(x) IS x and json_valid(x) -> stripscan_is_date(x), stripscan_is_json(x)
--   below; GLOB 'NNNN-NN-NNT*Z' -> the same pattern as a regular expression.
-- * The triggers that keep history are row triggers raising SQLSTATE 23000
--   (integrity constraint violation, as SQLite's RAISE(ABORT) is a constraint
--   failure) with SQLite's own words; every table whose rows SQLite never
--   deletes also refuses TRUNCATE, which skips row triggers.
-- * SQLite's "no_replace" INSERT guards are not carried over: they exist
--   because INSERT OR REPLACE deletes a row without firing DELETE triggers.
--   PostgreSQL has no REPLACE; its primary keys and unique indexes refuse the
--   row, and INSERT ... ON CONFLICT DO UPDATE fires the UPDATE triggers.
-- * Columns and their order are SQLite's, so SELECT * reads the same record.
--
-- Never edit this file once released: add 0002_....sql instead, which ends by
-- inserting its version into stripscan_schema.

-- The schema version, as SQLite's PRAGMA user_version: the highest row is the
-- version the database is at.  The table's presence marks a stripscan archive.
CREATE TABLE stripscan_schema (
    version integer PRIMARY KEY CHECK (version > 0),
    summary text COLLATE "C" NOT NULL,
    applied_at timestamptz NOT NULL DEFAULT now()
);
COMMENT ON TABLE stripscan_schema IS 'stripscan lot archive: schema versions applied, one row each';

-- SQLite's date(x) IS x: a real calendar day written YYYY-MM-DD.  A cast of a
-- day that does not exist raises, hence the exception block.
CREATE FUNCTION stripscan_is_date(value text) RETURNS boolean
LANGUAGE plpgsql IMMUTABLE STRICT AS $$
BEGIN
    RETURN value ~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}$' AND to_char(value::date, 'YYYY-MM-DD') = value;
EXCEPTION WHEN invalid_datetime_format OR datetime_field_overflow THEN
    RETURN false;
END
$$;

-- SQLite's json_valid(x): the text parses as JSON.
CREATE FUNCTION stripscan_is_json(value text) RETURNS boolean
LANGUAGE plpgsql IMMUTABLE STRICT AS $$
BEGIN
    PERFORM value::json;
    RETURN true;
EXCEPTION WHEN invalid_text_representation THEN
    RETURN false;
END
$$;

-- SQLite's json_extract(document, path) for the paths the archive reads
-- ('$', '$.key.key', '$.key[0]'), so that its queries run on both: the value
-- at the path, SQL NULL where there is none or it is JSON null.  A number or
-- a string comes back as one; an object or array as JSON (SQLite gives its
-- text).  Compare its result in Python or with IS [NOT] NULL, as jsonb does
-- not compare with a number in SQL.
CREATE FUNCTION json_extract(document text, path text) RETURNS jsonb
LANGUAGE sql IMMUTABLE STRICT AS $$
    SELECT nullif(CASE WHEN path = '$' THEN document::jsonb
        ELSE document::jsonb #> regexp_split_to_array(
            regexp_replace(regexp_replace(substr(path, 2), '\[([0-9]+)\]', '.\1', 'g'), '^\.', ''), '\.')
        END, 'null'::jsonb)
$$;

-- A trigger's refusal: its first argument is the message.
CREATE FUNCTION stripscan_refuse() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION USING ERRCODE = 'integrity_constraint_violation', MESSAGE = TG_ARGV[0];
END
$$;

CREATE TABLE film_types (
    name text COLLATE "C" PRIMARY KEY NOT NULL CHECK (length(trim(name)) > 0),
    description text COLLATE "C" NOT NULL DEFAULT ''
);

CREATE TABLE emulsion_lots (
    lot_id text COLLATE "C" PRIMARY KEY NOT NULL CHECK (length(trim(lot_id)) > 0),
    film_type text COLLATE "C" REFERENCES film_types(name),
    expiry_date text COLLATE "C" CHECK (expiry_date IS NULL OR stripscan_is_date(expiry_date)),
    received_date text COLLATE "C" CHECK (received_date IS NULL OR stripscan_is_date(received_date)),
    notes text COLLATE "C" NOT NULL DEFAULT ''
);

CREATE TABLE processors (
    name text COLLATE "C" PRIMARY KEY NOT NULL CHECK (length(trim(name)) > 0),
    place text COLLATE "C" NOT NULL DEFAULT '',
    chemistry text COLLATE "C" NOT NULL DEFAULT '',
    developer_temperature_c double precision,
    cycle_time_s double precision,
    notes text COLLATE "C" NOT NULL DEFAULT ''
);

CREATE TABLE sensitometers (
    sensitometer_id text COLLATE "C" PRIMARY KEY NOT NULL CHECK (length(trim(sensitometer_id)) > 0),
    description text COLLATE "C" NOT NULL DEFAULT '',
    log_exposures_json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(log_exposures_json))
);

-- A calibration is stored once and found by the sha256 of its text.
CREATE TABLE calibrations (
    hash text COLLATE "C" PRIMARY KEY NOT NULL CHECK (length(hash) = 64),
    json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(json))
);

CREATE TABLE snapshots (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    created_at text COLLATE "C" NOT NULL CHECK (created_at ~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}T.*Z$'),
    lot_id text COLLATE "C" NOT NULL REFERENCES emulsion_lots(lot_id),
    processor text COLLATE "C" REFERENCES processors(name),
    sensitometer text COLLATE "C" REFERENCES sensitometers(sensitometer_id),
    calibration_hash text COLLATE "C" REFERENCES calibrations(hash),
    operator text COLLATE "C" NOT NULL DEFAULT '',
    exposed_on text COLLATE "C" CHECK (exposed_on IS NULL OR stripscan_is_date(exposed_on)),
    processed_on text COLLATE "C" CHECK (processed_on IS NULL OR stripscan_is_date(processed_on)),
    scanned_on text COLLATE "C" CHECK (scanned_on IS NULL OR stripscan_is_date(scanned_on)),
    scan_path text COLLATE "C" NOT NULL,
    scan_sha256 text COLLATE "C" NOT NULL CHECK (length(scan_sha256) = 64),
    strip_index bigint NOT NULL,
    base_fog double precision,
    dmax double precision,
    speed_log_exposure double precision,
    average_gradient double precision,
    gamma double precision,
    latitude_log_exposure double precision,
    mid_density double precision,
    density_difference double precision,
    revises bigint REFERENCES snapshots(id) CHECK (revises IS NULL OR revises < id),
    revision_reason text COLLATE "C",
    retired_at text COLLATE "C",
    retired_reason text COLLATE "C",
    program_version text COLLATE "C" NOT NULL DEFAULT '',
    notes text COLLATE "C" NOT NULL DEFAULT '',
    CHECK ((revises IS NULL) = (revision_reason IS NULL)),
    CHECK ((retired_at IS NULL) = (retired_reason IS NULL))
);

-- The bulky part of a snapshot lives beside it, one row each, so that
-- listings and trends scan a table of small rows.
CREATE TABLE snapshot_data (
    snapshot_id bigint PRIMARY KEY REFERENCES snapshots(id),
    scan_json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(scan_json)),
    settings_json text COLLATE "C" NOT NULL DEFAULT '{}' CHECK (stripscan_is_json(settings_json)),
    warnings_json text COLLATE "C" NOT NULL DEFAULT '[]' CHECK (stripscan_is_json(warnings_json)),
    strip_json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(strip_json)),
    preview_png bytea CHECK (preview_png IS NULL OR (octet_length(preview_png) <= 65536
        AND substr(preview_png, 1, 8) = '\x89504e470d0a1a0a'::bytea))
);

-- One revision per snapshot keeps a correction chain a straight line.
CREATE UNIQUE INDEX snapshots_revises ON snapshots(revises) WHERE revises IS NOT NULL;
CREATE INDEX snapshots_lot ON snapshots(lot_id);
CREATE INDEX snapshots_processor ON snapshots(processor);

CREATE TABLE snapshot_steps (
    snapshot_id bigint NOT NULL REFERENCES snapshots(id),
    step bigint NOT NULL,
    log_exposure double precision,
    od double precision,
    od_sd double precision,
    pixels bigint NOT NULL,
    in_range bigint NOT NULL CHECK (in_range IN (0, 1)),
    excluded bigint NOT NULL CHECK (excluded IN (0, 1)),
    PRIMARY KEY (snapshot_id, step)
);

-- Remarks added to a snapshot after the fact, without touching the snapshot.
CREATE TABLE snapshot_notes (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    snapshot_id bigint NOT NULL REFERENCES snapshots(id),
    created_at text COLLATE "C" NOT NULL CHECK (created_at ~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}T.*Z$'),
    author text COLLATE "C" NOT NULL DEFAULT '',
    text text COLLATE "C" NOT NULL CHECK (length(trim(text)) > 0)
);
CREATE INDEX snapshot_notes_snapshot ON snapshot_notes(snapshot_id);

-- Processor QC entries: a same-day repeat strip links to the entry it
-- repeats, a correction to the entry it corrects, with a reason.
CREATE TABLE qc_entries (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    processor text COLLATE "C" NOT NULL REFERENCES processors(name),
    date text COLLATE "C" NOT NULL CHECK (stripscan_is_date(date)),
    base_fog double precision,
    mid_density double precision,
    density_difference double precision,
    source text COLLATE "C" NOT NULL CHECK (source IN ('scan', 'manual')),
    snapshot_id bigint REFERENCES snapshots(id),
    note text COLLATE "C" NOT NULL DEFAULT '',
    action text COLLATE "C" NOT NULL DEFAULT '',
    recorded_at text COLLATE "C" CHECK (recorded_at IS NULL OR recorded_at ~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}T.*Z$'),
    repeat_of bigint REFERENCES qc_entries(id) CHECK (repeat_of IS NULL OR repeat_of < id),
    corrects bigint REFERENCES qc_entries(id) CHECK (corrects IS NULL OR corrects < id),
    reason text COLLATE "C" CHECK (reason IS NULL OR length(trim(reason)) > 0),
    entered_late bigint NOT NULL DEFAULT 0 CHECK (entered_late IN (0, 1)),
    CHECK (repeat_of IS NULL OR corrects IS NULL),
    CHECK ((corrects IS NULL) = (reason IS NULL))
);
-- An entry is repeated at most once and corrected at most once: chains stay straight lines.
CREATE UNIQUE INDEX qc_entries_repeat_of ON qc_entries(repeat_of) WHERE repeat_of IS NOT NULL;
CREATE UNIQUE INDEX qc_entries_corrects ON qc_entries(corrects) WHERE corrects IS NOT NULL;
CREATE INDEX qc_entries_day ON qc_entries(processor, date);

CREATE TABLE qc_events (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    processor text COLLATE "C" NOT NULL REFERENCES processors(name),
    date text COLLATE "C" NOT NULL CHECK (stripscan_is_date(date)),
    kind text COLLATE "C" NOT NULL CHECK (length(trim(kind)) > 0),
    note text COLLATE "C" NOT NULL DEFAULT ''
);
CREATE INDEX qc_events_processor ON qc_events(processor, date);

-- QC settings are a history: every change is a new row with its time and
-- reason; the latest row of a processor is in force.
CREATE TABLE qc_settings (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    processor text COLLATE "C" NOT NULL REFERENCES processors(name),
    settings_json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(settings_json)),
    updated_at text COLLATE "C" NOT NULL,
    reason text COLLATE "C" NOT NULL DEFAULT ''
);
CREATE INDEX qc_settings_processor ON qc_settings(processor, id);

CREATE TABLE crossovers (
    id bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY,
    processor text COLLATE "C" NOT NULL REFERENCES processors(name),
    date text COLLATE "C" NOT NULL CHECK (stripscan_is_date(date)),
    record_json text COLLATE "C" NOT NULL CHECK (stripscan_is_json(record_json))
);
CREATE INDEX crossovers_processor ON crossovers(processor, date);

-- The hash chain over every stored record (stripscan/archive/chain.py).
CREATE TABLE record_chain (
    seq bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY CHECK (seq > 0),
    kind text COLLATE "C" NOT NULL,
    key text COLLATE "C" NOT NULL,
    content_sha256 text COLLATE "C" NOT NULL CHECK (length(content_sha256) = 64),
    chain_sha256 text COLLATE "C" NOT NULL CHECK (length(chain_sha256) = 64)
);
CREATE INDEX record_chain_record ON record_chain(kind, key);


-- ---------------------------------------------------------------- history
-- The audit trail is enforced by the server itself, so that no other tool
-- (or a slip in this one), and not even the tables' owner, can rewrite it.

CREATE TRIGGER snapshots_no_delete BEFORE DELETE ON snapshots FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('snapshots are never deleted; retire the snapshot instead');
CREATE TRIGGER snapshots_no_truncate BEFORE TRUNCATE ON snapshots FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('snapshots are never deleted; retire the snapshot instead');
-- As in SQLite: naming any column but the retirement's in an UPDATE is refused ...
CREATE TRIGGER snapshots_frozen BEFORE UPDATE OF
        id, created_at, lot_id, processor, sensitometer, calibration_hash, operator,
        exposed_on, processed_on, scanned_on, scan_path, scan_sha256, strip_index,
        base_fog, dmax, speed_log_exposure, average_gradient, gamma, latitude_log_exposure,
        mid_density, density_difference, revises, revision_reason, program_version, notes
    ON snapshots FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('snapshots are never changed; store a revision instead');
-- ... and, beyond SQLite, so is any change of value outside the retirement,
-- which also covers a column a later version adds and forgets to list above.
CREATE TRIGGER snapshots_frozen_values BEFORE UPDATE ON snapshots FOR EACH ROW
    WHEN ((to_jsonb(OLD) - 'retired_at' - 'retired_reason')
          IS DISTINCT FROM (to_jsonb(NEW) - 'retired_at' - 'retired_reason'))
    EXECUTE FUNCTION stripscan_refuse('snapshots are never changed; store a revision instead');
CREATE TRIGGER snapshots_retire_once BEFORE UPDATE OF retired_at, retired_reason ON snapshots FOR EACH ROW
    WHEN (OLD.retired_at IS NOT NULL OR NEW.retired_at IS NULL
          OR NEW.retired_reason IS NULL OR length(trim(NEW.retired_reason)) = 0)
    EXECUTE FUNCTION stripscan_refuse('a snapshot is retired once, with a reason, and stays retired');

CREATE TRIGGER snapshot_data_no_update BEFORE UPDATE ON snapshot_data FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('stored snapshot data is never changed');
CREATE TRIGGER snapshot_data_no_delete BEFORE DELETE ON snapshot_data FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('stored snapshot data is never deleted');
CREATE TRIGGER snapshot_data_no_truncate BEFORE TRUNCATE ON snapshot_data FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('stored snapshot data is never deleted');

CREATE TRIGGER snapshot_steps_no_update BEFORE UPDATE ON snapshot_steps FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('stored step densities are never changed');
CREATE TRIGGER snapshot_steps_no_delete BEFORE DELETE ON snapshot_steps FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('stored step densities are never deleted');
CREATE TRIGGER snapshot_steps_no_truncate BEFORE TRUNCATE ON snapshot_steps FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('stored step densities are never deleted');

CREATE TRIGGER calibrations_no_update BEFORE UPDATE ON calibrations FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('a stored calibration is never changed');
CREATE TRIGGER calibrations_no_delete BEFORE DELETE ON calibrations FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('a stored calibration is never deleted');
CREATE TRIGGER calibrations_no_truncate BEFORE TRUNCATE ON calibrations FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('a stored calibration is never deleted');

CREATE TRIGGER snapshot_notes_no_update BEFORE UPDATE ON snapshot_notes FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('notes are never changed; add another note');
CREATE TRIGGER snapshot_notes_no_delete BEFORE DELETE ON snapshot_notes FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('notes are never deleted; add another note');
CREATE TRIGGER snapshot_notes_no_truncate BEFORE TRUNCATE ON snapshot_notes FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('notes are never deleted; add another note');

CREATE TRIGGER qc_entries_no_update BEFORE UPDATE ON qc_entries FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC entries are never changed; store a correction instead');
CREATE TRIGGER qc_entries_no_delete BEFORE DELETE ON qc_entries FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC entries are never deleted; store a correction instead');
CREATE TRIGGER qc_entries_no_truncate BEFORE TRUNCATE ON qc_entries FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('QC entries are never deleted; store a correction instead');

-- The rules of a QC day, SQLite's triggers qc_entries_one_entry_a_day,
-- qc_entries_links and qc_entries_late in one function.  An entry "holds"
-- its day while nothing corrects it (a correction may move a wrongly dated
-- entry to another day, which frees the old one).  SQLite lets one writer
-- at a time in; here the inserts of one processor's entries queue on a lock
-- held to the end of the transaction, and each check below, a statement of
-- its own, sees what the writer before committed.
CREATE FUNCTION qc_entries_rules() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    PERFORM pg_advisory_xact_lock(hashtext('stripscan qc_entries'), hashtext(NEW.processor));
    IF NEW.repeat_of IS NULL
        AND (NEW.corrects IS NULL OR NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.corrects AND date = NEW.date))
        AND EXISTS (SELECT 1 FROM qc_entries e WHERE e.processor = NEW.processor AND e.date = NEW.date
            AND NOT EXISTS (SELECT 1 FROM qc_entries c WHERE c.corrects = e.id))
    THEN
        RAISE EXCEPTION USING ERRCODE = 'integrity_constraint_violation',
            MESSAGE = 'one QC entry in use per processor and day; store a repeat or a correction instead';
    END IF;
    IF (NEW.repeat_of IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.repeat_of AND processor = NEW.processor AND date = NEW.date))
        OR (NEW.corrects IS NOT NULL AND NOT EXISTS (SELECT 1 FROM qc_entries
            WHERE id = NEW.corrects AND processor = NEW.processor))
    THEN
        RAISE EXCEPTION USING ERRCODE = 'integrity_constraint_violation',
            MESSAGE = 'a repeat names an entry of the same processor and day, a correction one of the same processor';
    END IF;
    IF NEW.entered_late = 0
        AND NOT (NEW.corrects IS NOT NULL AND EXISTS (SELECT 1 FROM qc_entries WHERE id = NEW.corrects
            AND date = NEW.date))
        AND EXISTS (SELECT 1 FROM qc_entries e WHERE e.processor = NEW.processor
            AND e.date > NEW.date AND e.id IS DISTINCT FROM NEW.corrects
            AND NOT EXISTS (SELECT 1 FROM qc_entries c WHERE c.corrects = e.id))
    THEN
        RAISE EXCEPTION USING ERRCODE = 'integrity_constraint_violation',
            MESSAGE = 'a QC entry dated before the latest day of its processor is stored marked as entered late';
    END IF;
    RETURN NEW;
END
$$;
CREATE TRIGGER qc_entries_rules BEFORE INSERT ON qc_entries FOR EACH ROW EXECUTE FUNCTION qc_entries_rules();

CREATE TRIGGER qc_events_no_update BEFORE UPDATE ON qc_events FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC events are never changed; store a new one instead');
CREATE TRIGGER qc_events_no_delete BEFORE DELETE ON qc_events FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC events are never deleted');
CREATE TRIGGER qc_events_no_truncate BEFORE TRUNCATE ON qc_events FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('QC events are never deleted');

CREATE TRIGGER crossovers_no_update BEFORE UPDATE ON crossovers FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('crossover records are never changed; store a new one instead');
CREATE TRIGGER crossovers_no_delete BEFORE DELETE ON crossovers FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('crossover records are never deleted');
CREATE TRIGGER crossovers_no_truncate BEFORE TRUNCATE ON crossovers FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('crossover records are never deleted');

CREATE TRIGGER qc_settings_no_update BEFORE UPDATE ON qc_settings FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC settings rows are never changed; store a new one instead');
CREATE TRIGGER qc_settings_no_delete BEFORE DELETE ON qc_settings FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('QC settings rows are never deleted');
CREATE TRIGGER qc_settings_no_truncate BEFORE TRUNCATE ON qc_settings FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('QC settings rows are never deleted');

-- A lot's details may be filled in later; its key never changes.
CREATE TRIGGER emulsion_lots_key BEFORE UPDATE OF lot_id ON emulsion_lots FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('a lot id is never changed');
CREATE TRIGGER emulsion_lots_no_delete BEFORE DELETE ON emulsion_lots FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('a lot is never deleted');
CREATE TRIGGER emulsion_lots_no_truncate BEFORE TRUNCATE ON emulsion_lots FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('a lot is never deleted');

CREATE TRIGGER record_chain_no_update BEFORE UPDATE ON record_chain FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('the record chain is never changed');
CREATE TRIGGER record_chain_no_delete BEFORE DELETE ON record_chain FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('the record chain is never changed');
CREATE TRIGGER record_chain_no_truncate BEFORE TRUNCATE ON record_chain FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('the record chain is never changed');
CREATE FUNCTION record_chain_in_order() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF NEW.seq IS DISTINCT FROM (SELECT coalesce(max(seq), 0) + 1 FROM record_chain) THEN
        RAISE EXCEPTION USING ERRCODE = 'integrity_constraint_violation',
            MESSAGE = 'the record chain only grows at its end';
    END IF;
    RETURN NEW;
END
$$;
CREATE TRIGGER record_chain_in_order BEFORE INSERT ON record_chain FOR EACH ROW
    EXECUTE FUNCTION record_chain_in_order();

-- The versions applied are history too.
CREATE TRIGGER stripscan_schema_no_update BEFORE UPDATE ON stripscan_schema FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('schema versions are never changed');
CREATE TRIGGER stripscan_schema_no_delete BEFORE DELETE ON stripscan_schema FOR EACH ROW
    EXECUTE FUNCTION stripscan_refuse('schema versions are never deleted');
CREATE TRIGGER stripscan_schema_no_truncate BEFORE TRUNCATE ON stripscan_schema FOR EACH STATEMENT
    EXECUTE FUNCTION stripscan_refuse('schema versions are never deleted');

INSERT INTO stripscan_schema (version, summary)
VALUES (1, 'the SQLite archive''s schema version 4: lots, processors, sensitometers, calibrations, '
           'snapshots and notes, processor QC with repeats, corrections and history, hash chain');
