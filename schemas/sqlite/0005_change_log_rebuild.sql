-- 0005_change_log_rebuild: the same change log, cheaper to add to (issue 6,
-- merge speed). Every local save and every incoming change-set stores one
-- change-log row per field it sets, so what each row costs to store counts.
--
-- 1. The check on `op` is written as comparisons instead of an IN list:
--    SQLite evaluates a CHECK with an IN list of more than two values by
--    building a temporary b-tree for every row inserted, which was a quarter
--    of the time spent storing an incoming change-set's entries. The allowed
--    values are unchanged. SQLite cannot change a CHECK constraint in place,
--    so the table is rebuilt with the same columns and key.
--
-- 2. The row index holds one entry per insert instead of one per field
--    inserted. An insert is logged as a run of entries with consecutive seqs
--    on one device, starting with the row's `id` entry (one entry per field
--    that has a value, in column order); the change-set format requires the
--    same of incoming files. So the index keeps every entry that is not an
--    insert, plus each insert's `id` entry, and the other entries of an
--    insert are found from it by seq (store::log::row_entries). Inserts are
--    nearly all of a season's log: the index shrinks about five-fold, and so
--    does the work of keeping it.

CREATE TABLE change_log_next (
    device_id TEXT NOT NULL,
    seq INTEGER NOT NULL CHECK (seq >= 1),
    hlc INTEGER NOT NULL,
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    op TEXT NOT NULL
        CHECK (op = 'insert' OR op = 'update' OR op = 'delete' OR op = 'restore'),
    field TEXT,
    old_value ANY,
    new_value ANY,
    PRIMARY KEY (device_id, seq)
) STRICT, WITHOUT ROWID;

INSERT INTO change_log_next
    SELECT device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value
    FROM change_log
    ORDER BY device_id, seq;

DROP TABLE change_log;

ALTER TABLE change_log_next RENAME TO change_log;

-- Queries must repeat the WHERE clause word for word for SQLite to use it.
CREATE INDEX change_log_row_idx ON change_log (table_name, row_id)
    WHERE op <> 'insert' OR field = 'id';
