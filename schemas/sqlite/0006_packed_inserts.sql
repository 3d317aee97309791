-- 0006_packed_inserts: a new row is ONE change-log entry instead of one per
-- field (issue 6, merge speed). Inserts are nearly all of a season's log
-- (1.05 million entries for 200 000 rows in a crew's 200-cage season), and
-- every entry stored costs the same work whatever it holds.
--
-- An insert entry now has op = 'insert', field NULL, old_value NULL and as
-- new_value the fields it set, packed: a JSON array of [field, value] pairs
-- in column order, each value as typed text (i:42, r:2.5, t:abc, x:00ff;
-- src/store/typed_text.rs). Its seq is the first of the consecutive seqs
-- its fields take, one per pair, so seqs and change-set files are as before.
-- Updates, deletes and restores are unchanged.
--
-- This file makes the new table and copies every entry that is not an
-- insert; the Rust step of this migration (store::migrations::pack_inserts)
-- then packs each insert run of the old table (its `id` entry and the
-- entries that follow it with consecutive seqs) into one entry, and
-- 0007_packed_inserts_swap.sql puts the new table in place.

CREATE TABLE change_log_next (
    device_id TEXT NOT NULL,
    seq INTEGER NOT NULL CHECK (seq >= 1),
    hlc INTEGER NOT NULL,
    table_name TEXT NOT NULL,
    row_id TEXT NOT NULL,
    op TEXT NOT NULL
        CHECK (op = 'insert' OR op = 'update' OR op = 'delete' OR op = 'restore'),
    field TEXT CHECK ((field IS NOT NULL) = (op = 'update')),
    old_value ANY,
    new_value ANY CHECK (op <> 'insert' OR typeof(new_value) = 'text'),
    PRIMARY KEY (device_id, seq)
) STRICT, WITHOUT ROWID;

INSERT INTO change_log_next
    SELECT device_id, seq, hlc, table_name, row_id, op, field, old_value, new_value
    FROM change_log
    WHERE op <> 'insert'
    ORDER BY device_id, seq;
