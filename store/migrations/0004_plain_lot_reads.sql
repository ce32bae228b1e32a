-- 0004: lots are read from their own columns again.
--
-- The packed copy of 0002 goes, with its index. Reading a process's lots
-- in time order stays one scan of a covering index, lots_read, which now
-- holds the lot's own columns: SQLite keeps it in step with the table, so
-- nothing has to be written twice and nothing can disagree.
DROP INDEX lots_read;
ALTER TABLE lots DROP COLUMN packed;
CREATE INDEX lots_read ON lots(process_id, voided, time, id, lot, shift, inspected, count, categories,
	inspector, note, revision, recorded, recorded_by, reason);
