-- 0008_operation_receipt: the answers to saves that carried an operation id
-- (issue 15, "every save is idempotent").
--
-- The tablet UI gives each save an id of its own (a UUIDv7 made in the page)
-- and sends it again when it retries: after a double tap, a dropped
-- connection, a reload with entries still waiting. The store writes the
-- receipt in the same transaction as the save, so a save and its receipt are
-- on disk together or not at all; a request whose id has a receipt is
-- answered with the stored answer and writes nothing.
--
-- Local bookkeeping of this database, like local_device: never exported,
-- never in the change log, never in a change-set. Receipts older than 90 days
-- are dropped when the database is opened.

CREATE TABLE operation_receipt (
    op_id TEXT PRIMARY KEY NOT NULL,
    operation TEXT NOT NULL,
    response TEXT NOT NULL,
    recorded_at INTEGER NOT NULL
) STRICT;

CREATE INDEX operation_receipt_recorded_at_idx ON operation_receipt (recorded_at);
