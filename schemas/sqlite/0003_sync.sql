-- 0003_sync: what sync between devices through change-set files needs
-- (issue 6). Numbered 0003 because 0002 is taken by the flag table.
--
-- The change log gains the operation 'restore' (a tombstoned row made live
-- again, used when a conflict between an edit and a delete is settled in
-- favour of the edit). SQLite cannot change a CHECK constraint in place, so
-- the table is rebuilt with the same columns, keys and index.
--
-- The sync_* tables are this device's own bookkeeping. They are not data
-- tables: they have no Table Schema in schemas/tables, are never exported and
-- never travel in a change-set.

CREATE TABLE change_log_next (
    device_id TEXT NOT NULL,
    seq INTEGER NOT NULL CHECK (seq >= 1),
    hlc INTEGER NOT NULL,
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    op TEXT NOT NULL CHECK (op IN ('insert', 'update', 'delete', 'restore')),
    field TEXT,
    old_value ANY,
    new_value ANY,
    PRIMARY KEY (device_id, seq)
) STRICT, WITHOUT ROWID;

INSERT INTO change_log_next
    SELECT device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value
    FROM change_log;

DROP TABLE change_log;

ALTER TABLE change_log_next RENAME TO change_log;

CREATE INDEX change_log_row_idx ON change_log (table_name, row_id, field);

-- What each device knew when it made its changes: the entries of `device_id`
-- from `from_seq` on (up to the next row of the same device) were made by a
-- device that had applied `other_device`'s entries 1..=`upto_seq`. Rows for
-- this device are written when it applies other devices' change-sets; rows
-- for other devices come from the `seen` list of their change-set headers.
-- Two edits "saw" each other exactly when this says so; that decides
-- conflicts.
CREATE TABLE sync_knowledge (
    device_id TEXT NOT NULL,
    from_seq INTEGER NOT NULL CHECK (from_seq >= 1),
    other_device TEXT NOT NULL,
    upto_seq INTEGER NOT NULL CHECK (upto_seq >= 0),
    PRIMARY KEY (device_id, from_seq, other_device)
) STRICT, WITHOUT ROWID;

-- Change-sets this device wrote: the same bytes go to every target, so a lost
-- or damaged copy can be written again exactly.
CREATE TABLE sync_written (
    first_seq INTEGER PRIMARY KEY CHECK (first_seq >= 1),
    last_seq INTEGER NOT NULL CHECK (last_seq >= first_seq),
    device_name TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    size_bytes INTEGER NOT NULL,
    written_at TEXT NOT NULL
) STRICT;

-- Change-sets of other devices applied here, one row per file. A device's
-- applied ranges are contiguous from seq 1.
CREATE TABLE sync_applied (
    device_id TEXT NOT NULL,
    first_seq INTEGER NOT NULL CHECK (first_seq >= 1),
    last_seq INTEGER NOT NULL CHECK (last_seq >= first_seq),
    sha256 TEXT NOT NULL,
    file_name TEXT NOT NULL,
    size_bytes INTEGER NOT NULL,
    applied_at TEXT NOT NULL,
    PRIMARY KEY (device_id, first_seq)
) STRICT, WITHOUT ROWID;

-- Human names of other devices, as their latest change-set gave them.
CREATE TABLE sync_device (
    device_id TEXT PRIMARY KEY NOT NULL,
    name TEXT NOT NULL
) STRICT, WITHOUT ROWID;

-- Open conflicts, recomputed from the change log whenever a row's entries
-- change. `field` is '' for the row's existence (delete against restore).
-- kind 'concurrent': two edits of one field that did not see each other, with
-- different values; kind 'deleted': an edit that the delete of its row did not
-- see. `other_*` is the entry that lost (or the edit), `current_*` the entry
-- in force (or the delete).
CREATE TABLE sync_conflict (
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    field TEXT NOT NULL,
    kind TEXT NOT NULL CHECK (kind IN ('concurrent', 'deleted')),
    other_device TEXT NOT NULL,
    other_seq INTEGER NOT NULL,
    current_device TEXT NOT NULL,
    current_seq INTEGER NOT NULL,
    PRIMARY KEY (table_name, row_id, field, kind, other_device, other_seq)
) STRICT, WITHOUT ROWID;

-- Rows hidden because a row with the same unique key (two censuses of one
-- taxon at one visit, say) was made on another device: the row with the
-- smallest id stays live, the others are stored with deleted = 1 and listed
-- here for review. key_text is the key's values, encoded as in change-sets.
CREATE TABLE sync_hidden (
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    key_text TEXT NOT NULL,
    kept_row_id TEXT NOT NULL,
    PRIMARY KEY (table_name, row_id)
) STRICT, WITHOUT ROWID;

CREATE INDEX sync_hidden_key_idx ON sync_hidden (table_name, key_text);

CREATE INDEX sync_hidden_kept_idx ON sync_hidden (table_name, kept_row_id);

-- Clocks that look wrong: another device's timestamps far ahead of this
-- device's clock ('ahead'), or this device's clock far behind the newest
-- timestamp it holds ('behind'). Accepted, but shown.
CREATE TABLE sync_clock_anomaly (
    id INTEGER PRIMARY KEY,
    noticed_at TEXT NOT NULL,
    device_id TEXT NOT NULL,
    kind TEXT NOT NULL CHECK (kind IN ('ahead', 'behind')),
    hlc INTEGER NOT NULL,
    local_millis INTEGER NOT NULL,
    file_name TEXT
) STRICT;

-- Every sync run: when, against which target, what it did, and whether it
-- finished (the UI shows the last finished run).
CREATE TABLE sync_run (
    id INTEGER PRIMARY KEY,
    started_at TEXT NOT NULL,
    finished_at TEXT NOT NULL,
    target TEXT NOT NULL,
    written INTEGER NOT NULL,
    applied INTEGER NOT NULL,
    skipped INTEGER NOT NULL,
    finished INTEGER NOT NULL CHECK (finished IN (0, 1))
) STRICT;
