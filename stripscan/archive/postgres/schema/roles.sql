-- Three group roles for one archive database, and what each may do.
--
-- {reader}, {recorder} and {physicist} are filled in with the roles' names
-- (a prefix, by default the database's name, then _reader, _recorder,
-- _physicist, so that two archives on one server keep their own), quoted as
-- identifiers; {reader_name} ... as string literals; {database} is the
-- database.  Run by whoever owns the archive's tables, with CREATEROLE.
-- Running it again (after a schema upgrade) grants again and changes nothing
-- else.  The roles cannot log in: an administrator grants one of them to
-- each person's login role.
--
--   reader     reads everything;
--   recorder   also adds snapshots (with the lots, processors and
--              calibrations they name), notes and QC entries (first strips,
--              repeats, late entries);
--   physicist  also sets QC limits and settings, records events and
--              crossovers, adds film types, sensitometers and lot details,
--              retires and revises snapshots and corrects QC entries.
--
-- No role may UPDATE or DELETE history: the triggers refuse that even to
-- the tables' owner.  The only UPDATEs granted are a snapshot's retirement
-- (which its trigger lets happen once) and a lot's details.

DO $$
DECLARE
    wanted text;
BEGIN
    FOREACH wanted IN ARRAY ARRAY[{reader_name}, {recorder_name}, {physicist_name}] LOOP
        IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = wanted) THEN
            EXECUTE format('CREATE ROLE %I NOLOGIN', wanted);
        END IF;
    END LOOP;
END
$$;
GRANT {reader} TO {recorder};
GRANT {recorder} TO {physicist};

GRANT CONNECT ON DATABASE {database} TO {reader};
GRANT USAGE ON SCHEMA public TO {reader};
GRANT SELECT ON ALL TABLES IN SCHEMA public TO {reader};

GRANT INSERT ON snapshots, snapshot_data, snapshot_steps, snapshot_notes, qc_entries,
    emulsion_lots, processors, calibrations, record_chain TO {recorder};
GRANT USAGE ON ALL SEQUENCES IN SCHEMA public TO {recorder};

GRANT INSERT ON qc_settings, qc_events, crossovers, film_types, sensitometers TO {physicist};
GRANT UPDATE (retired_at, retired_reason) ON snapshots TO {physicist};
GRANT UPDATE (film_type, expiry_date, received_date, notes) ON emulsion_lots TO {physicist};

-- A revision, a snapshot stored retired (an archive copied in) and a QC
-- correction are rows a recorder may not insert though the table is theirs
-- to add to: row-level security tells them apart.  Policies name roles, so
-- they follow role membership, which no user can change for themselves.
-- The tables' owner is not subject to them.
ALTER TABLE snapshots ENABLE ROW LEVEL SECURITY;
DROP POLICY IF EXISTS snapshots_read ON snapshots;
DROP POLICY IF EXISTS snapshots_record ON snapshots;
DROP POLICY IF EXISTS snapshots_revise ON snapshots;
DROP POLICY IF EXISTS snapshots_retire ON snapshots;
CREATE POLICY snapshots_read ON snapshots FOR SELECT TO {reader} USING (true);
CREATE POLICY snapshots_record ON snapshots FOR INSERT TO {recorder}
    WITH CHECK (revises IS NULL AND retired_at IS NULL);
CREATE POLICY snapshots_revise ON snapshots FOR INSERT TO {physicist} WITH CHECK (true);
CREATE POLICY snapshots_retire ON snapshots FOR UPDATE TO {physicist} USING (true) WITH CHECK (true);

ALTER TABLE qc_entries ENABLE ROW LEVEL SECURITY;
DROP POLICY IF EXISTS qc_entries_read ON qc_entries;
DROP POLICY IF EXISTS qc_entries_record ON qc_entries;
DROP POLICY IF EXISTS qc_entries_correct ON qc_entries;
CREATE POLICY qc_entries_read ON qc_entries FOR SELECT TO {reader} USING (true);
CREATE POLICY qc_entries_record ON qc_entries FOR INSERT TO {recorder} WITH CHECK (corrects IS NULL);
CREATE POLICY qc_entries_correct ON qc_entries FOR INSERT TO {physicist} WITH CHECK (true);
