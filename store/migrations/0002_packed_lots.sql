-- 0002: a packed copy of each lot for chart reads, and a change counter
-- per process.
--
-- packed holds the values of the lot (time, counts, text fields, category
-- counts) in one compact blob, so that reading a process's lots in time
-- order is one scan of the covering index lots_read, one column per lot.
-- The columns stay the record; the blob is filled from them on every
-- write (and for the rows already stored, by the Go step of this
-- migration), and `lotwatch audit verify` checks that both agree.
ALTER TABLE lots ADD COLUMN packed BLOB NOT NULL DEFAULT x'';
CREATE INDEX lots_read ON lots(process_id, voided, time, id, packed);

-- lot_versions counts the changes to what a process's chart is drawn
-- from: version grows with every write of its lots, limit sets or
-- settings; rewrites only with those that change stored lots or the way
-- they are judged (a correction, a void, a limit set, new settings), so
-- that a reader holding the lots of an earlier version knows whether
-- reading the lots added since is enough.
CREATE TABLE lot_versions (
	process_id INTEGER PRIMARY KEY REFERENCES processes(id),
	version    INTEGER NOT NULL,
	rewrites   INTEGER NOT NULL
);
