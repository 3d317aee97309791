-- 0004_sync_target: the sync target folder this database syncs with on its own
-- (issue 6, "back online"; set from the settings screen).
--
-- A local setting of this database, like the device name: it lives in
-- local_device, which is not a data table, so it is never exported, never
-- logged in the change log and never travels in a change-set. NULL means no
-- target is set and nothing syncs on its own.

ALTER TABLE local_device ADD COLUMN sync_target TEXT;
