-- 0002_flags: the flags raised by the day's-end checks (issue 4), so that a
-- flag keeps its status (open / fixed / confirmed) and its confirmation note
-- across check runs, goes into the change log like any other data, syncs and
-- is exported for the analyst.
--
-- Mirrors schemas/tables/flag.json (same columns in the same order) plus the
-- `deleted` tombstone, like every data table. A flag is identified by its rule,
-- the record it points at and the related record (if any): re-running the
-- checks updates that one row instead of adding another, hence the unique key.

CREATE TABLE flag (
    id TEXT PRIMARY KEY NOT NULL,
    rule_id TEXT NOT NULL,
    family TEXT NOT NULL,
    severity TEXT NOT NULL,
    enclosure_id TEXT NOT NULL REFERENCES enclosure(id),
    day INTEGER NOT NULL,
    record_table TEXT NOT NULL,
    record_id TEXT NOT NULL,
    related_table TEXT,
    related_id TEXT,
    message TEXT NOT NULL,
    fix TEXT NOT NULL,
    note TEXT,
    status TEXT NOT NULL,
    deleted INTEGER NOT NULL DEFAULT 0 CHECK (deleted IN (0, 1)),
    -- A confirmation always says why the data are right as recorded. The
    -- write path changes a row field by field in column order, which is why
    -- note comes before status: confirming sets the note first.
    CHECK (status <> 'confirmed' OR coalesce(length(trim(note)), 0) > 0)
) STRICT;

CREATE UNIQUE INDEX flag_rule_id_record_id_related_id_key ON flag (rule_id, record_id, coalesce(related_id, '')) WHERE deleted = 0;

CREATE INDEX flag_enclosure_id_idx ON flag (enclosure_id);
