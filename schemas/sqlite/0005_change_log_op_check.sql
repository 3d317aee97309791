-- 0005_change_log_op_check: the same change log, with the check on `op`
-- written as comparisons instead of an IN list (issue 6, merge speed).
--
-- SQLite evaluates a CHECK with an IN list of more than two values by
-- building a temporary b-tree for every row inserted; with one change-log
-- row per field changed, that was a quarter of the time spent storing the
-- entries of an incoming change-set. The allowed values are unchanged.
-- SQLite cannot change a CHECK constraint in place, so the table is rebuilt
-- with the same columns, keys and index.

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

CREATE INDEX change_log_row_idx ON change_log (table_name, row_id, field);
