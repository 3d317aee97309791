-- 0007_packed_inserts_swap: the change log of 0006, with every insert
-- packed, replaces the old one. With one entry per insert the row index
-- holds every entry again (0005's partial index is no longer needed).

DROP TABLE change_log;

ALTER TABLE change_log_next RENAME TO change_log;

CREATE INDEX change_log_row_idx ON change_log (table_name, row_id);
